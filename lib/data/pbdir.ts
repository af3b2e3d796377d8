// Calibration samples as ONNX TensorProto files in the conformance-test layout:
// DIR/test_data_set_K/input_I.pb (and output_I.pb). DIR may also be one set.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import { fsError, readRegular } from '../util/fsx.js';
import { decodeTensor } from '../onnx/codec.js';
import { tensorDims, elementCount } from '../onnx/tensor.js';
import { dtypeInfo, dtypeName } from '../onnx/dtype.js';
import type { TensorProto } from '../onnx/types.js';

export type PbData = Float32Array | Float64Array | Int32Array | BigInt64Array | Uint8Array | Int8Array | Int16Array
  | Uint16Array /* uint16, or float16 raw bits */ | Uint32Array | BigUint64Array;
export interface PbTensor { name?: string; dtype: number /* ONNX element type */; dims: number[]; data: PbData }

const err = (msg: string, file: string) => new OfframpError('data', msg, file);
const SET = /^test_data_set_(\d+)$/;
const byIndex = (re: RegExp) => (a: string, b: string) => Number(re.exec(a)![1]) - Number(re.exec(b)![1]);

/** The set folders of DIR in numeric order; DIR itself if it holds input_*.pb directly. */
export function listDataSets(dir: string): string[] {
  let names: string[];
  try { names = fs.readdirSync(dir); } catch (e) { throw fsError(e, dir, 'cannot read the folder'); }
  if (names.some((n) => /^input_\d+\.pb$/.test(n))) return [dir];
  const sets = names.filter((n) => SET.test(n) && fs.statSync(path.join(dir, n), { throwIfNoEntry: false })?.isDirectory()).sort(byIndex(SET));
  if (!sets.length) throw err('no test_data_set_* folders and no input_*.pb files', dir);
  return sets.map((n) => path.join(dir, n));
}

/** input_0.pb, input_1.pb, … (or output_*) of one set, in index order. */
export function setFiles(setDir: string, kind: 'input' | 'output' = 'input'): string[] {
  const re = new RegExp(`^${kind}_(\\d+)\\.pb$`);
  let names: string[];
  try { names = fs.readdirSync(setDir); } catch (e) { throw fsError(e, setDir, 'cannot read the folder'); }
  return names.filter((n) => re.test(n)).sort(byIndex(re)).map((n) => path.join(setDir, n));
}

type Ctor = { new (buf: ArrayBuffer): PbData; BYTES_PER_ELEMENT: number };
const RAW: Record<number, Ctor> = {
  1: Float32Array, 2: Uint8Array, 3: Int8Array, 4: Uint16Array, 5: Int16Array, 6: Int32Array, 7: BigInt64Array,
  9: Uint8Array, 10: Uint16Array, 11: Float64Array, 12: Uint32Array, 13: BigUint64Array,
};

/** Values of a decoded tensor as a typed array of its element type. */
export function tensorData(t: TensorProto, file: string): PbTensor {
  const dtype = t.dataType ?? 0;
  const where = t.name ? `tensor ${t.name}` : 'tensor';
  let dims: number[];
  try { dims = tensorDims(t); } catch (e) { throw err(`${where}: ${(e as Error).message}`, file); }
  const n = Number(elementCount(dims));
  const C = RAW[dtype];
  if (!C) throw err(`${where}: element type ${dtypeName(dtype)} is not supported as calibration data`, file);
  if (t.dataLocation === 1) throw err(`${where}: external data is not supported in calibration sets`, file);
  const out = { ...(t.name !== undefined && { name: t.name }), dtype, dims };
  if (t.rawData && t.rawData.length) {
    const bytes = n * (dtypeInfo(dtype).bits / 8);
    if (t.rawData.length !== bytes) throw err(`${where}: raw_data has ${t.rawData.length} bytes, dims [${dims.join(', ')}] need ${bytes}`, file);
    // An aligned copy: raw_data is a view at any offset into the file (and a Buffer's slice() would be a view too).
    return { ...out, data: new C(new Uint8Array(t.rawData).buffer) };
  }
  // Typed fields, per onnx.proto: which repeated field carries which element type.
  const field: ArrayLike<number | bigint> | undefined =
    dtype === 1 ? t.floatData : dtype === 11 ? t.doubleData : dtype === 7 ? t.int64Data
      : dtype === 12 || dtype === 13 ? t.uint64Data : t.int32Data;
  const src = field ?? [];
  if (src.length !== n) throw err(`${where}: ${src.length} values, dims [${dims.join(', ')}] need ${n}`, file);
  const data = new C(new ArrayBuffer(n * C.BYTES_PER_ELEMENT));
  if (data instanceof BigInt64Array || data instanceof BigUint64Array) for (let i = 0; i < n; i++) data[i] = BigInt(src[i]);
  else for (let i = 0; i < n; i++) data[i] = Number(src[i]);
  return { ...out, data };
}

export function readTensorFile(file: string): PbTensor {
  const buf: Uint8Array = readRegular(file, 'data');
  let t: TensorProto;
  try { t = decodeTensor(buf); } catch (e) { throw err(`not a TensorProto: ${(e as Error).message}`, file); }
  return tensorData(t, file);
}

/** Each set's inputs (or outputs), one set at a time: a set is one sample or one batch. */
export function* pbSamples(dir: string, kind: 'input' | 'output' = 'input'): Generator<{ set: string; tensors: PbTensor[] }> {
  for (const set of listDataSets(dir)) {
    const files = setFiles(set, kind);
    if (!files.length) throw err(`no ${kind}_*.pb files`, set);
    yield { set, tensors: files.map(readTensorFile) };
  }
}

// loadModel / saveModel: file ↔ IR, with external data and checked structure.
import fs from 'node:fs';
import path from 'node:path';
import { decodeModel, encodeModel, CodecError, unknownFieldPaths, PROTO_LIMIT } from '../onnx/codec.js';
import { loadExternalData, placeTensors, allTensors, EXTERNAL } from '../onnx/external.js';
import { DTYPES, bytesFor } from '../onnx/dtype.js';
import type { ModelProto } from '../onnx/types.js';
import { modelFromProto, modelToProto, type Model } from './ir.js';
import { topoOrder } from './links.js';
import { OfframpError } from '../errors.js';
import { writeAtomic } from '../util/atomic.js';
import { readRegular } from '../util/fsx.js';

export interface LoadedModel extends Model { file?: string }

export interface LoadOptions { /** skip the structure check (cycles, dangling inputs) */ unchecked?: boolean }

/** Read and decode an ONNX file (external data beside it included); throws OfframpError naming the file. */
export function loadModel(file: string, opts: LoadOptions = {}): LoadedModel {
  return parseModel(readRegular(file, 'model'), file, opts);
}

export function parseModel(buf: Uint8Array, file?: string, opts: LoadOptions = {}): LoadedModel {
  if (buf.length === 0) throw new OfframpError('decode', 'file is empty, not an ONNX model', file);
  let proto;
  try { proto = decodeModel(buf); } catch (e) {
    // Anything else (a RangeError, say) is still a bad file, not a crash.
    throw new OfframpError('decode', `not a valid ONNX model: ${e instanceof CodecError ? e.message : String((e as Error).message ?? e)}`, file);
  }
  if (!proto.graph) throw new OfframpError('decode', 'not a valid ONNX model: it has no graph', file);
  if (proto.irVersion === undefined || !proto.opsetImport?.length)
    throw new OfframpError('decode', 'not a valid ONNX model: ir_version or opset_import is missing', file);
  checkTensors(proto, file);
  if (file) loadExternalData(proto, file);
  let model: Model;
  try {
    model = modelFromProto(proto);
    if (!opts.unchecked) topoOrder(model.graph);
  } catch (e) {
    if (e instanceof OfframpError) throw new OfframpError(e.kind, e.message, file, e.where);
    throw new OfframpError('decode', `not a valid ONNX model: ${(e as Error).message}`, file);
  }
  return { ...model, file };
}

const knownTypes = new Set(DTYPES.map((d) => d.id));
const SAFE = BigInt(Number.MAX_SAFE_INTEGER);

/** Dims, element type and inline raw_data size of every tensor, before anything sizes or reads them. */
function checkTensors(proto: ModelProto, file?: string): void {
  for (const t of allTensors(proto)) {
    const bad = (msg: string) => new OfframpError('decode', msg, file, `tensor '${t.name ?? ''}'`);
    let count = 1n;
    for (const d of t.dims ?? []) {
      if (d < 0n || d > SAFE) throw bad(`dim ${d} is negative or absurd`);
      count *= d;
    }
    const dt = t.dataType ?? 0;
    if (!knownTypes.has(dt)) throw bad(`unknown element type ${dt}`);
    const bytes = bytesFor(dt, count);
    if (bytes > SAFE) throw bad(`dims [${Array.from(t.dims ?? []).join(', ')}] imply ${bytes} bytes, which is absurd`);
    // Strings have no fixed width; segments split one tensor over several protos.
    if (t.rawData && t.dataLocation !== EXTERNAL && dt !== 8 && !t.segment && BigInt(t.rawData.length) !== bytes)
      throw bad(`raw_data holds ${t.rawData.length} bytes, but its dims and type need ${bytes}`);
  }
}

export interface SaveOptions {
  /** Put tensors of at least this many bytes into one external data file. */
  externalThreshold?: number;
  /** File name of that external file, beside the model (default: <model>.data). */
  externalFile?: string;
}

export interface SaveReport { bytes: number; externalBytes: number; unknownFields: string[] }

export function saveModel(model: Model, file: string, opts: SaveOptions = {}): SaveReport {
  const ext = opts.externalThreshold !== undefined
    ? { file: opts.externalFile ?? `${path.basename(file)}.data`, threshold: opts.externalThreshold }
    : undefined;
  const { model: proto, chunks } = placeTensors(modelToProto(model), ext);
  let bytes: Uint8Array;
  try { bytes = encodeModel(proto); } catch (e) {
    if (e instanceof CodecError) throw new OfframpError('io', `${e.message}${ext ? '' : ' (save with externalThreshold)'}`, file);
    throw e;
  }
  if (bytes.length > PROTO_LIMIT) throw new OfframpError('io', 'model over 2 GiB; save with external data', file);
  // The data file goes first: a model never points at a data file that is not complete.
  if (ext && chunks.length) writeAtomic(path.join(path.dirname(file), ext.file), chunks);
  writeAtomic(file, bytes);
  return {
    bytes: bytes.length,
    externalBytes: chunks.reduce((s, c) => s + c.length, 0),
    unknownFields: unknownFieldPaths(proto, 'ModelProto'),
  };
}

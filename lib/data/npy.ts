// NumPy .npy files: calibration inputs and labels. Read in row batches with
// fs.readSync, so a file far larger than memory costs one batch at a time.
// Layout follows numpy's format spec (numpy.lib.format): magic, version, header
// length (u16 for 1.0, u32 for 2.0/3.0), a Python dict literal, then the data.
import fs from 'node:fs';
import os from 'node:os';
import { OfframpError } from '../errors.js';
import { writeAtomic } from '../util/atomic.js';
import { openRegular } from '../util/fsx.js';
import { FLOAT, DOUBLE, INT64, INT32, UINT8, INT8, FLOAT16, BOOL } from '../onnx/dtype.js';

export interface NpyHeader {
  version: [number, number]; descr: string; dtype: number /* ONNX element type */; shape: number[]; fortran: boolean;
  dataOffset: number; itemBytes: number; rows: number /* shape[0]; 1 for a 0-d array */;
}
export type NpyArray = Float32Array | Float64Array | Int32Array | BigInt64Array | Uint8Array | Int8Array | Uint16Array /* f2 raw bits */;

const MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]; // "\x93NUMPY"
// descr without its byte-order char → [ONNX type, bytes, array constructor].
type Ctor = { new (buf: ArrayBuffer, off: number, len: number): NpyArray; BYTES_PER_ELEMENT: number };
const KINDS: Record<string, [number, number, Ctor]> = {
  f4: [FLOAT, 4, Float32Array], f8: [DOUBLE, 8, Float64Array], i8: [INT64, 8, BigInt64Array], i4: [INT32, 4, Int32Array],
  u1: [UINT8, 1, Uint8Array], i1: [INT8, 1, Int8Array], f2: [FLOAT16, 2, Uint16Array], b1: [BOOL, 1, Uint8Array],
};
const err = (msg: string, file: string) => new OfframpError('data', msg, file);

function readFully(fd: number, buf: Uint8Array, pos: number): number {
  let got = 0;
  while (got < buf.length) {
    const n = fs.readSync(fd, buf, got, buf.length - got, pos + got);
    if (n === 0) break;
    got += n;
  }
  return got;
}

function withFd<T>(file: string, f: (fd: number) => T): T {
  const fd = openRegular(file, 'data');
  try { return f(fd); } finally { fs.closeSync(fd); }
}

function parseHeader(fd: number, file: string): NpyHeader {
  const pre = new Uint8Array(12);
  const got = readFully(fd, pre, 0);
  if (got < 10 || MAGIC.some((b, i) => pre[i] !== b)) throw err('not a .npy file (bad magic)', file);
  const major = pre[6], minor = pre[7];
  if (![1, 2, 3].includes(major) || minor !== 0) throw err(`unsupported .npy format version ${major}.${minor}`, file);
  const dv = new DataView(pre.buffer);
  const start = major === 1 ? 10 : 12;
  if (got < start) throw err('truncated .npy header', file);
  const hlen = major === 1 ? dv.getUint16(8, true) : dv.getUint32(8, true);
  const size = fs.fstatSync(fd).size;
  // A header length from a corrupt file could ask for gigabytes: the file must hold it first.
  if (start + hlen > size) throw err(`truncated .npy header: it claims ${hlen} bytes, the file has ${size - start} after the preamble`, file);
  const hb = new Uint8Array(hlen);
  if (readFully(fd, hb, start) < hlen) throw err('truncated .npy header', file);
  // 1.0/2.0 headers are latin1; 3.0 allows UTF-8 (structured field names).
  const text = new TextDecoder(major === 3 ? 'utf-8' : 'latin1').decode(hb);
  const descrM = /'descr'\s*:\s*'([^']*)'/.exec(text);
  const fortM = /'fortran_order'\s*:\s*(True|False)/.exec(text);
  const shapeM = /'shape'\s*:\s*\(([^)]*)\)/.exec(text);
  if (!descrM) {
    if (/'descr'\s*:\s*\[/.test(text)) throw err('structured (record) arrays are not supported; save a plain numeric array', file);
    throw err('malformed .npy header: no descr', file);
  }
  if (!fortM || !shapeM) throw err('malformed .npy header', file);
  const descr = descrM[1];
  const shape = shapeM[1].split(',').map((s) => s.trim()).filter((s) => s !== '').map((s) => {
    const n = Number(s.replace(/L$/, ''));
    if (!Number.isSafeInteger(n) || n < 0) throw err(`malformed .npy shape (${shapeM[1]})`, file);
    return n;
  });
  const fortran = fortM[1] === 'True';
  const order = descr[0], kind = descr.slice(1);
  if (kind === 'O') throw err('object arrays (dtype object) are not supported; save a numeric array', file);
  const k = KINDS[kind];
  if (order === '>' && (k || /^[fiuc]\d+$/.test(kind))) {
    throw err(`big-endian data (${descr}) is not supported; convert with arr.astype('<${kind}')`, file);
  }
  if (!k || !(order === '<' || (order === '|' && k[1] === 1) || (order === '=' && k[1] === 1))) {
    throw err(`unsupported dtype ${descr}; use float32, float64, float16, int64, int32, uint8, int8 or bool`, file);
  }
  // A 1-d or 0-d array is the same bytes in either order.
  if (fortran && shape.filter((d) => d !== 1).length > 1) throw err('Fortran-order arrays are not supported; save with np.ascontiguousarray', file);
  const h: NpyHeader = { version: [major, minor], descr, dtype: k[0], shape, fortran, dataOffset: start + hlen, itemBytes: k[1], rows: shape.length ? shape[0] : 1 };
  const need = h.dataOffset + count(shape) * h.itemBytes;
  if (size < need) throw err(`truncated: header promises ${need} bytes (shape (${shape.join(', ')}) ${descr}), file has ${size}`, file);
  return h;
}

const count = (shape: readonly number[]) => shape.reduce((a, b) => a * b, 1);
function hostLE(): void {
  // Typed arrays use host byte order and .npy data here is little-endian.
  if (os.endianness() !== 'LE') throw new OfframpError('data', '.npy support needs a little-endian host');
}

export function readNpyHeader(file: string): NpyHeader {
  return withFd(file, (fd) => parseHeader(fd, file));
}

/** The header of a file of samples: at least one row, and values in each. */
export function readDataHeader(file: string): NpyHeader {
  const h = readNpyHeader(file);
  if (!h.shape.length) throw err('holds a single value (a 0-d array), not rows of samples [N, …]', file);
  if (h.rows === 0) throw err('holds no samples (0 rows)', file);
  if (count(h.shape) === 0) throw err(`samples of shape [${h.shape.slice(1).join(', ')}] hold no values`, file);
  return h;
}

/**
 * The first non-finite value of a batch of float data (NaN or ±Infinity would be fitted and tuned as if
 * they were measurements), as an error naming the file's row; integers are always finite.
 */
export function checkFinite(a: NpyArray | Float32Array, rows: number, startRow: number, file: string): void {
  if (!(a instanceof Float32Array || a instanceof Float64Array || a instanceof Uint16Array)) return;
  const half = a instanceof Uint16Array, per = a.length / rows;
  for (let i = 0; i < a.length; i++) {
    const v = half ? halfToNumber(a[i]) : a[i];
    if (!Number.isFinite(v)) throw new OfframpError('data', `value ${v} (element ${i % per} of the row): data must be finite`, file, `row ${startRow + Math.floor(i / per)}`);
  }
}

/** Consecutive batches of up to batchRows rows (along axis 0), of rows from … to − 1 (default: all); each batch is a fresh buffer. */
export function* npyBatches(file: string, batchRows: number, range: { from?: number; to?: number } = {}): Generator<{ start: number; rows: number; shape: number[]; data: NpyArray }> {
  hostLE();
  if (!(Number.isInteger(batchRows) && batchRows > 0)) throw new OfframpError('usage', `batch rows must be a positive integer, got ${batchRows}`);
  const fd = openRegular(file, 'data');
  try {
    const h = parseHeader(fd, file);
    const from = range.from ?? 0, to = Math.min(range.to ?? h.rows, h.rows);
    if (!(Number.isInteger(from) && from >= 0 && Number.isInteger(to))) throw new OfframpError('usage', `row range ${from}…${to} is not whole rows`);
    const rest = h.shape.slice(1), per = count(rest), Ctor = KINDS[h.descr.slice(1)][2];
    for (let start = from; start < to; start += batchRows) {
      const rows = Math.min(batchRows, to - start);
      const buf = new Uint8Array(rows * per * h.itemBytes);
      if (readFully(fd, buf, h.dataOffset + start * per * h.itemBytes) < buf.length) throw err('truncated while reading', file);
      const data = new Ctor(buf.buffer, 0, rows * per);
      checkFinite(data, rows, start, file);
      yield { start, rows, shape: h.shape.length ? [rows, ...rest] : [], data };
    }
  } finally { fs.closeSync(fd); }
}

export function readNpy(file: string): { header: NpyHeader; data: NpyArray } {
  hostLE();
  return withFd(file, (fd) => {
    const header = parseHeader(fd, file);
    const n = count(header.shape);
    const buf = new Uint8Array(n * header.itemBytes);
    if (readFully(fd, buf, header.dataOffset) < buf.length) throw err('truncated while reading', file);
    return { header, data: new KINDS[header.descr.slice(1)][2](buf.buffer, 0, n) };
  });
}

/** IEEE 754 binary16 bits → number. */
export function halfToNumber(h: number): number {
  const s = h & 0x8000 ? -1 : 1, e = (h >> 10) & 0x1f, m = h & 0x3ff;
  if (e === 0) return s * m * 2 ** -24;
  if (e === 31) return m ? NaN : s * Infinity;
  return s * (1 + m / 1024) * 2 ** (e - 15);
}

/** Values as float32: float16 bits decoded, integers converted. A Float32Array input is returned as is. */
export function toFloat32(a: NpyArray): Float32Array {
  if (a instanceof Float32Array) return a;
  const out = new Float32Array(a.length);
  if (a instanceof Uint16Array) for (let i = 0; i < a.length; i++) out[i] = halfToNumber(a[i]);
  else if (a instanceof BigInt64Array) for (let i = 0; i < a.length; i++) out[i] = Number(a[i]);
  else out.set(a);
  return out;
}

function descrOf(a: NpyArray): string {
  if (a instanceof Float32Array) return '<f4';
  if (a instanceof Float64Array) return '<f8';
  if (a instanceof Int32Array) return '<i4';
  if (a instanceof BigInt64Array) return '<i8';
  if (a instanceof Uint8Array) return '|u1';
  if (a instanceof Int8Array) return '|i1';
  return '<f2';
}

/** The header bytes numpy's write_array emits (format 1.0; 2.0 only if the header outgrows a u16). */
export function npyHeaderBytes(descr: string, shape: readonly number[]): Uint8Array {
  // numpy ≥1.23 pads after the dict so shape[0] can grow to 21 digits in place, then aligns data to 64 bytes.
  const tuple = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
  let dict = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${tuple}, }`;
  if (shape.length) dict += ' '.repeat(Math.max(0, 21 - String(shape[0]).length));
  const encode = (major: number) => {
    const pre = major === 1 ? 10 : 12;
    const pad = 64 - ((pre + dict.length + 1) % 64);
    const text = dict + ' '.repeat(pad % 64) + '\n';
    const out = new Uint8Array(pre + text.length);
    out.set(MAGIC); out[6] = major; out[7] = 0;
    const dv = new DataView(out.buffer);
    if (major === 1) dv.setUint16(8, text.length, true); else dv.setUint32(8, text.length, true);
    out.set(new TextEncoder().encode(text), pre);
    return out;
  };
  return dict.length + 64 < 65536 ? encode(1) : encode(2);
}

export function writeNpy(file: string, data: NpyArray, shape: number[]): void {
  hostLE();
  if (count(shape) !== data.length) throw new OfframpError('usage', `shape (${shape.join(', ')}) holds ${count(shape)} values, data has ${data.length}`, file);
  writeAtomic(file, [npyHeaderBytes(descrOf(data), shape), new Uint8Array(data.buffer, data.byteOffset, data.byteLength)]);
}

/**
 * The per-sample shape (without a batch dim) to feed as [B, ...result], after
 * checking the file's [N, ...] against the model input. A sample may match the
 * model input without its batch dim ([N,1,28,28] for [B,1,28,28]) or with it
 * ([N,1,1,28,28], batch dim 1). Symbolic or non-positive model dims match anything.
 */
export function sampleShape(h: NpyHeader, modelInput: readonly (number | string)[], file: string): number[] {
  const per = h.shape.slice(1);
  const fits = (data: readonly number[], model: readonly (number | string)[]) =>
    data.length === model.length && data.every((d, i) => typeof model[i] !== 'number' || (model[i] as number) <= 0 || model[i] === d);
  if (h.shape.length >= 1 && fits(per, modelInput.slice(1))) return per;
  if (per.length >= 1 && per[0] === 1 && fits(per, modelInput)) return per.slice(1);
  const show = (s: readonly (number | string)[]) => `[${s.map((d) => (typeof d === 'number' && d > 0 ? d : typeof d === 'string' && d ? d : '?')).join(', ')}]`;
  throw err(`data shape [${h.shape.join(', ')}] does not match the model input ${show(modelInput)}: expected ${show(['N', ...modelInput.slice(1)])}`, file);
}

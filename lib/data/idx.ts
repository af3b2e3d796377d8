// IDX files, the format of the MNIST family: two zero bytes, a type code, the
// rank, big-endian u32 dims, then big-endian values (format as published with
// the MNIST data; common practice). Gzipped files are inflated whole: the
// largest of the family is ~47 MB unpacked.
import zlib from 'node:zlib';
import { OfframpError } from '../errors.js';
import { readRegular } from '../util/fsx.js';

export type IdxData = Uint8Array | Int8Array | Int16Array | Int32Array | Float32Array | Float64Array;
export interface Idx { type: number; dims: number[]; data: IdxData }

const TYPES: Record<number, [number, (v: DataView, o: number) => number, new (n: number) => IdxData]> = {
  0x08: [1, (v, o) => v.getUint8(o), Uint8Array], 0x09: [1, (v, o) => v.getInt8(o), Int8Array],
  0x0b: [2, (v, o) => v.getInt16(o), Int16Array], 0x0c: [4, (v, o) => v.getInt32(o), Int32Array],
  0x0d: [4, (v, o) => v.getFloat32(o), Float32Array], 0x0e: [8, (v, o) => v.getFloat64(o), Float64Array],
};
const err = (msg: string, file: string) => new OfframpError('data', msg, file);

export function readIdx(file: string): Idx {
  let buf: Uint8Array = readRegular(file, 'data');
  if (buf[0] === 0x1f && buf[1] === 0x8b) {
    try { buf = zlib.gunzipSync(buf); } catch (e) { throw err(`bad gzip data: ${(e as Error).message}`, file); }
  }
  if (buf.length < 4 || buf[0] !== 0 || buf[1] !== 0) throw err('not an IDX file (bad magic)', file);
  const t = TYPES[buf[2]];
  if (!t) throw err(`unknown IDX type code 0x${buf[2].toString(16)}`, file);
  const rank = buf[3], v = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
  const start = 4 + 4 * rank;
  if (buf.length < start) throw err('truncated IDX header', file);
  const dims = Array.from({ length: rank }, (_, i) => v.getUint32(4 + 4 * i));
  const n = dims.reduce((a, b) => a * b, 1), [size, get, C] = t;
  if (buf.length < start + n * size) throw err(`truncated: dims [${dims.join(', ')}] need ${start + n * size} bytes, file has ${buf.length}`, file);
  let data: IdxData;
  // new Uint8Array(view) copies: a Buffer's slice() is a view that would pin the whole file.
  if (size === 1) { const b = new Uint8Array(buf.subarray(start, start + n)); data = buf[2] === 0x08 ? b : new Int8Array(b.buffer); }
  else { data = new C(n); for (let i = 0; i < n; i++) data[i] = get(v, start + i * size); }
  return { type: buf[2], dims, data };
}

/** Images [N, rows, cols] of u8 as float32 in [0,1] (x / 255), laid out as [N, 1, rows, cols]. */
export function readIdxImages(file: string): { count: number; rows: number; cols: number; data: Float32Array } {
  const x = readIdx(file);
  if (x.type !== 0x08 || x.dims.length !== 3) throw err(`expected u8 images [N, rows, cols], got type 0x${x.type.toString(16)} dims [${x.dims.join(', ')}]`, file);
  const data = new Float32Array(x.data.length);
  for (let i = 0; i < data.length; i++) data[i] = x.data[i] / 255;
  return { count: x.dims[0], rows: x.dims[1], cols: x.dims[2], data };
}

export function readIdxLabels(file: string): Int32Array {
  const x = readIdx(file);
  if (x.dims.length !== 1 || x.type === 0x0d || x.type === 0x0e) throw err(`expected integer labels [N], got dims [${x.dims.join(', ')}]`, file);
  return Int32Array.from(x.data);
}

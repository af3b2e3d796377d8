// Tensor payload access. raw_data stays a view; typed fields convert only when asked.
import type { TensorProto } from './types.js';
import { dtypeInfo, bytesFor } from './dtype.js';
import { CodecError } from './codec.js';

export function tensorDims(t: TensorProto): number[] {
  return Array.from(t.dims ?? [], (d) => {
    if (d < 0n || d > BigInt(Number.MAX_SAFE_INTEGER)) throw new CodecError(`tensor dim ${d} is negative or absurd`, `tensor ${t.name ?? ''}`);
    return Number(d);
  });
}

export function elementCount(dims: readonly number[]): bigint {
  let n = 1n;
  for (const d of dims) n *= BigInt(d);
  return n;
}

/** Bytes the tensor's values occupy when stored raw (what a device stores). */
export function tensorByteSize(t: TensorProto): bigint {
  return bytesFor(t.dataType ?? 0, elementCount(tensorDims(t)));
}

/** Values as JS numbers (int64 beyond 2^53 saturates); for small constants, not weights. */
export function tensorNumbers(t: TensorProto, limit = 1 << 16): number[] | undefined {
  const dt = t.dataType ?? 0;
  const n = Number(elementCount(tensorDims(t)));
  if (n > limit) return undefined;
  const raw = t.rawData;
  if (raw && raw.length) {
    const v = new DataView(raw.buffer, raw.byteOffset, raw.byteLength);
    const out: number[] = new Array(n);
    const get: ((i: number) => number) | undefined = ({
      1: (i: number) => v.getFloat32(i * 4, true), 2: (i: number) => v.getUint8(i), 3: (i: number) => v.getInt8(i),
      4: (i: number) => v.getUint16(i * 2, true), 5: (i: number) => v.getInt16(i * 2, true), 6: (i: number) => v.getInt32(i * 4, true),
      7: (i: number) => sat(v.getBigInt64(i * 8, true)), 9: (i: number) => v.getUint8(i), 11: (i: number) => v.getFloat64(i * 8, true),
      12: (i: number) => v.getUint32(i * 4, true), 13: (i: number) => sat(v.getBigUint64(i * 8, true)),
      10: (i: number) => half(v.getUint16(i * 2, true)), 16: (i: number) => bfloat(v.getUint16(i * 2, true)),
    } as Record<number, (i: number) => number>)[dt];
    if (!get) return undefined;
    if (raw.length < n * (dtypeInfo(dt).bits / 8)) throw new CodecError('raw_data is shorter than its dims say', `tensor ${t.name ?? ''}`);
    for (let i = 0; i < n; i++) out[i] = get(i);
    return out;
  }
  if (t.dataLocation === 1) return undefined;
  if (dt === 1 && t.floatData) return Array.from(t.floatData);
  if (dt === 11 && t.doubleData) return Array.from(t.doubleData);
  if ((dt === 7) && t.int64Data) return Array.from(t.int64Data, sat);
  if ((dt === 12 || dt === 13) && t.uint64Data) return Array.from(t.uint64Data, sat);
  if (dt === 10 && t.int32Data) return Array.from(t.int32Data, half);
  if (dt === 16 && t.int32Data) return Array.from(t.int32Data, bfloat);
  if ([2, 3, 4, 5, 6, 9].includes(dt)) return Array.from(t.int32Data ?? new Int32Array(n));
  if (n === 0) return [];
  return undefined;
}

const sat = (b: bigint): number =>
  b > BigInt(Number.MAX_SAFE_INTEGER) ? Number.MAX_SAFE_INTEGER : b < BigInt(Number.MIN_SAFE_INTEGER) ? Number.MIN_SAFE_INTEGER : Number(b);

const f32 = new Float32Array(1), u32 = new Uint32Array(f32.buffer);
/** bfloat16 bits: the top half of a float32. */
function bfloat(h: number): number { u32[0] = (h & 0xffff) << 16; return f32[0]; }

function half(h: number): number {
  const s = h & 0x8000 ? -1 : 1, e = (h >> 10) & 0x1f, m = h & 0x3ff;
  if (e === 0) return s * m * 2 ** -24;
  if (e === 31) return m ? NaN : s * Infinity;
  return s * (1 + m / 1024) * 2 ** (e - 15);
}

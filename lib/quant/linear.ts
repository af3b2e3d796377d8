// Linear quantization arithmetic as the ONNX operators define it: QuantizeLinear
// y = saturate(round_half_even(x / scale) + zero_point), DequantizeLinear
// y = (x - zero_point) * scale, per tensor or per axis, in float32 (the spec's
// tensor type), and the choice of scales: symmetric int8 weights per output
// channel, asymmetric int8 activations per tensor, int32 biases at s_x·s_w.
// Pure numbers: no graph, no runtime.
import { OfframpError } from '../errors.js';

export const INT8_MIN = -128, INT8_MAX = 127;
const INT32_MIN = -2147483648, INT32_MAX = 2147483647;
const f32 = Math.fround;

/** Round half to even (IEEE 754 roundTiesToEven), as the operator definitions require. */
export function roundHalfEven(x: number): number {
  const r = Math.round(x);
  // Math.round sends ties up; a tie landing on an odd integer goes back down to the even one.
  return r - x === 0.5 && r % 2 !== 0 ? r - 1 : r;
}

export interface QuantParams {
  /** one scale per tensor, or one per slice along `axis` */
  scale: Float32Array;
  zeroPoint: Int32Array;
  /** the per-axis axis (non-negative); undefined for per tensor */
  axis?: number;
  /** the integer range: int8 [-128, 127], int32 */
  lo: number; hi: number;
}

/** Index of the scale for each element of a row-major tensor of `dims`. */
function channelOf(dims: readonly number[], axis: number | undefined): (i: number) => number {
  if (axis === undefined) return () => 0;
  const inner = dims.slice(axis + 1).reduce((a, b) => a * b, 1), n = dims[axis];
  return (i) => Math.floor(i / inner) % n;
}

function checkParams(p: QuantParams, dims: readonly number[]): void {
  const n = p.axis === undefined ? 1 : dims[p.axis];
  if (p.scale.length !== n || p.zeroPoint.length !== n) throw new OfframpError('data', `quantization needs ${n} scales and zero points, got ${p.scale.length} and ${p.zeroPoint.length}`);
}

/** QuantizeLinear: the division in float32 (both operands float32, result rounded to float32). */
export function quantize(x: ArrayLike<number>, dims: readonly number[], p: QuantParams): Int32Array {
  checkParams(p, dims);
  const ch = channelOf(dims, p.axis);
  const out = new Int32Array(x.length);
  for (let i = 0; i < x.length; i++) {
    const c = ch(i);
    const v = roundHalfEven(f32(f32(x[i]) / p.scale[c])) + p.zeroPoint[c];
    // NaN saturates to the zero point's neighbourhood nowhere in the spec; inputs here are finite.
    out[i] = v < p.lo ? p.lo : v > p.hi ? p.hi : v;
  }
  return out;
}

/** DequantizeLinear: (x − zero_point) converted to float32, times the float32 scale, rounded to float32. */
export function dequantize(q: ArrayLike<number>, dims: readonly number[], p: QuantParams): Float32Array {
  checkParams(p, dims);
  const ch = channelOf(dims, p.axis);
  const out = new Float32Array(q.length);
  for (let i = 0; i < q.length; i++) { const c = ch(i); out[i] = f32(f32(q[i] - p.zeroPoint[c]) * p.scale[c]); }
  return out;
}

/**
 * Asymmetric int8 parameters for a real range [lo, hi] (per tensor). The range is widened to hold
 * 0 so that zero (padding, Relu's floor) is exactly representable (common practice); a range of
 * one point gets scale 1.
 */
export function activationParams(lo: number, hi: number): { scale: number; zeroPoint: number } {
  if (!Number.isFinite(lo) || !Number.isFinite(hi) || lo > hi) throw new OfframpError('data', `no finite range to quantize: [${lo}, ${hi}]`);
  const a = Math.min(lo, 0), b = Math.max(hi, 0);
  if (b - a === 0) return { scale: 1, zeroPoint: 0 };
  const scale = f32((b - a) / (INT8_MAX - INT8_MIN));
  const z = roundHalfEven(INT8_MIN - a / scale);
  return { scale, zeroPoint: Math.min(INT8_MAX, Math.max(INT8_MIN, z)) };
}

/**
 * Symmetric int8 weights per slice along `axis` (the output channel): scale = max|w| / 127, zero
 * point 0, range [-127, 127] so that −w is representable too (common practice). An all-zero
 * channel gets scale 1.
 */
export function quantizeWeights(w: Float32Array, dims: readonly number[], axis: number): { q: Int8Array; params: QuantParams } {
  const n = dims[axis];
  const ch = channelOf(dims, axis);
  const amax = new Float64Array(n);
  for (let i = 0; i < w.length; i++) {
    if (!Number.isFinite(w[i])) throw new OfframpError('data', `weight value ${w[i]} is not finite`);
    const c = ch(i); const a = Math.abs(w[i]); if (a > amax[c]) amax[c] = a;
  }
  const scale = Float32Array.from(amax, (a) => (a > 0 ? f32(a / 127) : 1));
  const params: QuantParams = { scale, zeroPoint: new Int32Array(n), axis, lo: -127, hi: 127 };
  return { q: Int8Array.from(quantize(w, dims, params)), params };
}

/** int32 bias per output channel at scale s_x·s_w[c] (the product in float32, as stored), zero point 0. */
export function quantizeBias(b: Float32Array, inputScale: number, weightScale: Float32Array): { q: Int32Array; params: QuantParams } {
  if (b.length !== weightScale.length) throw new OfframpError('data', `bias has ${b.length} values for ${weightScale.length} output channels`);
  const scale = Float32Array.from(weightScale, (s) => f32(f32(inputScale) * s));
  const params: QuantParams = { scale, zeroPoint: new Int32Array(b.length), axis: 0, lo: INT32_MIN, hi: INT32_MAX };
  return { q: quantize(b, [b.length], params), params };
}

/** Per-tensor int8 parameters in the form `quantize` takes. */
export const perTensor = (scale: number, zeroPoint: number): QuantParams =>
  ({ scale: Float32Array.of(scale), zeroPoint: Int32Array.of(zeroPoint), lo: INT8_MIN, hi: INT8_MAX });

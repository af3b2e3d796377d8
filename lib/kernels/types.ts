// The kernels' parameters: the TypeScript form of the structs in offramp_kernels.h, field for field.
import type { Multiplier } from './requant.js';

export interface ConvParams {
  inC: number; inH: number; inW: number; outC: number; outH: number; outW: number;
  kH: number; kW: number; strideH: number; strideW: number; dilH: number; dilW: number; padTop: number; padLeft: number;
  groups: number;
  inZero: number; outZero: number; lo: number; hi: number;
  /** [outC][inC / groups][kH][kW] */
  weight: Int8Array;
  /** [outC], −inZero · Σw folded in */
  bias: Int32Array;
  mul: Multiplier[];
}

export interface DenseParams {
  in: number; out: number;
  inZero: number; outZero: number; lo: number; hi: number;
  /** [out][in] */
  weight: Int8Array;
  bias: Int32Array;
  mul: Multiplier[];
}

export interface PoolParams {
  c: number; inH: number; inW: number; outH: number; outW: number;
  kH: number; kW: number; strideH: number; strideW: number; dilH: number; dilW: number;
  padTop: number; padLeft: number; padBottom: number; padRight: number;
  includePad: boolean;
  inZero: number; outZero: number; lo: number; hi: number;
  /** AveragePool: by count, [kH · kW + 1]; MaxPool: empty */
  mul: Multiplier[];
}

export interface RescaleParams { n: number; inZero: number; outZero: number; lo: number; hi: number; mul: Multiplier }

/**
 * Add and Mul of two int8 tensors. `a` has all n values; `b` is broadcast: each of its bN values serves
 * `inner` consecutive values of a, and the pattern repeats (bN = n, inner = 1: the same shape; bN = 1,
 * inner = n: a scalar; bN = C, inner = H·W: one value per channel, as squeeze-and-excitation multiplies).
 */
export interface BinaryParams {
  n: number; inner: number; bN: number;
  aZero: number; bZero: number; outZero: number; lo: number; hi: number;
}
/** y = round(((a − aZero)·multA + (b − bZero)·multB) / 2^shift), ties to even: one rounding of the exact sum; multipliers below 2^21, shift 1 … 31. */
export interface AddParams extends BinaryParams { multA: number; multB: number; shift: number }
/** y = requant((a − aZero)·(b − bZero)) with mul = s_a·s_b / s_y. */
export interface MulParams extends BinaryParams { mul: Multiplier }

/** An elementwise function of one int8 value as a table: y = table[x + 128] (clamp included). */
export interface LutParams { n: number; table: Int8Array }

/** Concat: `outer` times, each part's next `block` values, requantized to the output's parameters. */
export interface ConcatPart { block: number; inZero: number; mul: Multiplier; copy: boolean }
export interface ConcatParams { outer: number; outZero: number; lo: number; hi: number; parts: ConcatPart[] }

/** Transpose: output dims, and for each output axis the input's stride along it (rank ≤ 6). */
export interface TransposeParams { n: number; dims: number[]; strides: number[] }

/** One part of a Split: `outer` times, `block` values from `start` within each input row of `inRow`, requantized to the part's parameters. */
export interface SliceParams {
  outer: number; inRow: number; start: number; block: number;
  inZero: number; outZero: number; lo: number; hi: number; mul: Multiplier; copy: boolean;
}

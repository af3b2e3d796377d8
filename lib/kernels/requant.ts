// Requantization by a fixed-point multiplier and shift (Jacob et al. 2018, "Quantization and
// Training of Neural Networks for Efficient Integer-Arithmetic-Only Inference", section 2.2): a
// real multiplier M = M0 · 2^-n with M0 in [0.5, 1) held as a Q31 integer, applied to an int32
// accumulator by a rounding doubling high multiply, then a rounding right shift (ties away from
// zero). The TypeScript twin of offramp_requant.h, operation for operation: every value stays an
// exact integer below 2^53, so the C library and this reference agree bit for bit.
import { OfframpError } from '../errors.js';

export const INT32_MIN = -2147483648, INT32_MAX = 2147483647;

/** M as a Q31 multiplier and a right shift: M ≈ mult · 2^(−31 − shift); shift < 0 shifts left first. */
export interface Multiplier { mult: number; shift: number }

/**
 * The fixed-point form of a positive real multiplier (computed once, when the model's tables are
 * written; the device never sees the real number). mult = round(m · 2^31) for M = m · 2^e with
 * m in [0.5, 1); a rounding up to 2^31 moves to 2^30 and one more power. Multipliers below 2^-32
 * are zero (every int32 accumulator requantizes to 0); 2^31 and above are refused.
 */
export function quantizeMultiplier(real: number, what = 'multiplier'): Multiplier {
  if (!Number.isFinite(real) || real < 0) throw new OfframpError('data', `${what} ${real} is not a finite non-negative number`);
  if (real === 0) return { mult: 0, shift: 0 };
  let e = Math.floor(Math.log2(real)) + 1;
  let m = real / 2 ** e;
  // log2 can be off by one near powers of two: put m back into [0.5, 1)
  while (m >= 1) { m /= 2; e++; }
  while (m < 0.5) { m *= 2; e--; }
  let q = Math.round(m * 2 ** 31);
  if (q === 2 ** 31) { q = 2 ** 30; e++; }
  const shift = 0 - e;   // not -e: a shift of -0 is not 0 to a deep equality
  // below 2^-32 every int32 accumulator is under half a step: the product rounds to 0
  if (shift > 31) return { mult: 0, shift: 0 };
  if (shift < -31) throw new OfframpError('data', `${what} ${real} is too large for a fixed-point requantization`);
  return { mult: q, shift };
}

/** Saturating rounding doubling high multiply: the high 32 bits of 2·a·b, rounded to nearest (ties up), saturated. */
export function highMul(a: number, b: number): number {
  if (a === INT32_MIN && b === INT32_MIN) return INT32_MAX;
  // a·b + 2^30, floor-divided by 2^31, exactly: b = bh·2^16 + bl splits the 62-bit product into parts below 2^53.
  const bh = Math.floor(b / 65536), bl = b - bh * 65536;
  const t = a * bh;                       // |t| < 2^46
  const u = a * bl + 1073741824;          // |u| < 2^48
  const uh = Math.floor(u / 65536);
  return Math.floor((t + uh) / 32768);    // the dropped low 16 bits of u cannot carry past 2^31
}

/** Arithmetic right shift by e (0…31), rounding to nearest with ties away from zero. */
export function roundShift(x: number, e: number): number {
  if (e <= 0) return x;
  const p = 2 ** e;
  const q = Math.floor(x / p), r = x - q * p;
  const half = p / 2;
  // floor leaves r in [0, p): round up above half, and at exactly half for positive x (away from zero)
  return r > half || (r === half && x >= 0) ? q + 1 : q;
}

const sat32 = (x: number) => (x < INT32_MIN ? INT32_MIN : x > INT32_MAX ? INT32_MAX : x);

/** acc · M in the int32 domain, before the output zero point. */
export function requantize(acc: number, m: Multiplier): number {
  if (m.mult === 0) return 0;
  if (m.shift < 0) return highMul(sat32(acc * 2 ** -m.shift), m.mult);
  return roundShift(highMul(acc, m.mult), m.shift);
}

/** The int8 result: zero point added, clamped to [lo, hi] (the activation's range fused into the clamp). */
export function toInt8(acc: number, m: Multiplier, zeroPoint: number, lo: number, hi: number): number {
  const v = requantize(acc, m) + zeroPoint;
  return v < lo ? lo : v > hi ? hi : v;
}

/** Round half to even, as QuantizeLinear rounds. */
export function roundEven(x: number): number {
  const r = Math.round(x);
  return r - x === 0.5 && r % 2 !== 0 ? r - 1 : r;
}

/** QuantizeLinear of one float32 value to int8: the quotient in float32, ties to even, saturated. */
export function quantizeValue(x: number, scale: number, zeroPoint: number): number {
  const v = roundEven(Math.fround(Math.fround(x) / Math.fround(scale))) + zeroPoint;
  return v < -128 ? -128 : v > 127 ? 127 : v;
}

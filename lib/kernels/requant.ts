// Requantization by a fixed-point multiplier and shift (Jacob et al. 2018, "Quantization and
// Training of Neural Networks for Efficient Integer-Arithmetic-Only Inference", section 2.2): a
// real multiplier M = M0 · 2^-n with M0 in [0.5, 1) held as a Q31 integer. The int32 accumulator
// times M0 is exact in 64 bits; it is shifted right by 31 + n with one rounding, to nearest with
// ties to even (as ONNX QuantizeLinear rounds), so the result is the exact product acc · M
// rounded once. (Rounding the high word first and the shift after, as some integer pipelines do,
// rounds twice and lands a step off on about one value in 2^(n+1).) The TypeScript twin of
// offramp_requant.h: every intermediate is an exact integer below 2^53, so the two agree bit for bit.
import { OfframpError } from '../errors.js';

export const INT32_MIN = -2147483648, INT32_MAX = 2147483647;

/** M as a Q31 multiplier and a right shift: M = mult · 2^(−31 − shift), shift in −15 … 31. */
export interface Multiplier { mult: number; shift: number }

/**
 * The fixed-point form of a non-negative real multiplier (computed once, when the model's tables
 * are written; the device never sees the real number). mult = round(m · 2^31) for M = m · 2^e with
 * m in [0.5, 1); a rounding up to 2^31 moves to 2^30 and one more power. Multipliers below 2^-32
 * are 0 (every int32 accumulator is under half a step); 2^16 and above are refused.
 */
export function quantizeMultiplier(real: number, what = 'multiplier'): Multiplier {
  if (!Number.isFinite(real) || real < 0) throw new OfframpError('data', `${what} ${real} is not a finite non-negative number`);
  if (real === 0) return { mult: 0, shift: 0 };
  let e = Math.floor(Math.log2(real)) + 1;
  let m = real / 2 ** e;
  // log2 can be off by one near powers of two: put m back into [0.5, 1)
  while (m >= 1) { m /= 2; e++; }
  while (m < 0.5) { m *= 2; e--; }
  let q = Math.floor(m * 2 ** 31 + 0.5);
  if (q === 2 ** 31) { q = 2 ** 30; e++; }
  const shift = 0 - e;   // not -e: a shift of -0 is not 0 to a deep equality
  if (shift > 31) return { mult: 0, shift: 0 };
  if (shift < -15) throw new OfframpError('data', `${what} ${real} is too large for a fixed-point requantization (2^16 or more)`);
  return { mult: q, shift };
}

/**
 * round(acc · mult / 2^(31 + shift)), ties to even, saturated to int32: exact. The 62-bit product is
 * taken apart in 16-bit pieces (mult = mh·2^16 + ml), so nothing exceeds 2^53.
 */
export function requantize(acc: number, m: Multiplier): number {
  if (m.mult === 0) return 0;
  const e = 31 + m.shift;                       // 16 … 62
  const mh = Math.floor(m.mult / 65536), ml = m.mult - mh * 65536;
  const b = acc * ml;                           // |b| < 2^47
  const bh = Math.floor(b / 65536), bl = b - bh * 65536;
  const t = acc * mh + bh;                      // the product is t·2^16 + bl, 0 ≤ bl < 2^16, |t| < 2^47
  const p = 2 ** (e - 16);
  let q = Math.floor(t / p);
  const r = t - q * p;                          // the product's remainder is r·2^16 + bl, in [0, 2^e)
  // compare the remainder with half of 2^e = 2^(e−1): with r against 2^(e−17), bl breaking the tie
  const half = e === 16 ? 0.5 : p / 2;
  const above = e === 16 ? bl > 32768 : r > half || (r === half && bl > 0);
  const tie = e === 16 ? bl === 32768 : r === half && bl === 0;
  if (above || (tie && q % 2 !== 0)) q++;
  return q < INT32_MIN ? INT32_MIN : q > INT32_MAX ? INT32_MAX : q;
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

/** 2^(30 + shift) − 1 as [low word, high word]: offramp_mul_t's rounding addend for shift ≥ 1 (0 otherwise). */
export function nudgeWords(m: Multiplier): [number, number] {
  if (m.shift < 1) return [0, 0];
  const e = 30 + m.shift;   // 31 … 61
  return e < 32 ? [2 ** e - 1, 0] : [0xffffffff, 2 ** (e - 32) - 1];
}

/** The C initializer of an offramp_mul_t. */
export function mulInitializer(m: Multiplier): string {
  const [lo, hi] = nudgeWords(m);
  return `{ ${m.mult}, ${m.shift}, ${lo}u, ${hi}u }`;
}

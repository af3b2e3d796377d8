// Single-precision arithmetic as a Cortex-M4F (or any IEEE 754 float32 unit) computes it, so the
// C decision code (lib/emit/c/offramp_decide.c) and this module agree to the last bit. Each
// + − × ÷ √ of float32 inputs is done in float64 and rounded once with Math.fround: for these
// operations the float64 result rounded to float32 is the correctly rounded float32 result
// (double rounding is innocuous when the wide format has ≥ 2p + 2 bits; Figueroa 1995, "When is
// double rounding innocuous?"), which is what a C `float` operation gives under FLT_EVAL_METHOD 0
// with contraction off. exp and log are our own sequences of such operations (no libm on the
// target): Cody–Waite range reduction and short Taylor series (common practice; error measured
// in test/policy.test.ts against Math.exp / Math.log).

export const f32 = Math.fround;

// one float32 seen as its bits (typed arrays over one buffer: the same byte order on both sides)
const fbuf = new Float32Array(1), ubuf = new Uint32Array(fbuf.buffer);
/** The float32's bit pattern. */
export function toBits32(x: number): number { fbuf[0] = x; return ubuf[0]; }
/** The float32 with this bit pattern. */
export function fromBits32(u: number): number { ubuf[0] = u; return fbuf[0]; }

/** The next float32 above x (x a float32, finite): the least float32 threshold t with x < t. */
export function nextUp32(x: number): number {
  const v = f32(x);
  if (v === 0) return fromBits32(1);
  const u = toBits32(v);
  return fromBits32(v > 0 ? u + 1 : u - 1);
}

// ln 2 split so that k · LN2_HI is exact for |k| < 2^8 (LN2_HI has 16 significant bits).
const LN2_HI = f32(0.693145751953125);          // 0x3f317200
const LN2_LO = f32(Math.LN2 - 0.693145751953125);
const LOG2E = f32(Math.LOG2E);
/** exp(x) overflows float32 above this, and is below half the least subnormal under EXP_MIN. */
const EXP_MAX = f32(88.72283172607422);         // largest float32 x with exp(x) < 2^128
const EXP_MIN = f32(-103.97208404541016);
// 1/n! for n = 2 … 7: Taylor coefficients of exp; |r| ≤ ln2/2 leaves a remainder below 2^-28
const E2 = f32(1 / 2), E3 = f32(1 / 6), E4 = f32(1 / 24), E5 = f32(1 / 120), E6 = f32(1 / 720), E7 = f32(1 / 5040);

/** 2^k, −126 ≤ k ≤ 127 (exact: a float32, and a float64 product by it rounds as the float32 one). */
const POW2 = Float64Array.from({ length: 254 }, (_, i) => 2 ** (i - 126));
const pow2 = (k: number) => POW2[k + 126];

/**
 * exp(x) in float32: x = k ln2 + r with k = round(x · log2 e), r = hi − lo, hi = x − k·LN2_HI (exact
 * by Sterbenz's lemma), lo = k·LN2_LO; exp(r) = 1 + (hi + (r²·P(r) − lo)), then scaled by 2^k
 * in one or two exact steps (two only when the result is subnormal, where the last one rounds).
 * This is the whole range; exp32 below runs the same operations inline where −126 ≤ k ≤ 127.
 */
function expWide(x: number): number {
  if (x !== x) return x;
  if (x > EXP_MAX) return Infinity;
  if (x < EXP_MIN) return 0;
  const t = f32(x * LOG2E);
  const k = Math.trunc(f32(t + (t < 0 ? -0.5 : 0.5)));
  const hi = f32(x - f32(k * LN2_HI)), lo = f32(k * LN2_LO);
  const r = f32(hi - lo);
  const p = f32(E2 + f32(r * f32(E3 + f32(r * f32(E4 + f32(r * f32(E5 + f32(r * f32(E6 + f32(r * E7))))))))));
  // hi + (r²P − lo) rather than r + r²P: the exact hi leads, so r's own rounding stays out of the sum
  const y = f32(1 + f32(hi + f32(f32(f32(r * r) * p) - lo)));
  if (k > 127) return f32(f32(y * 2) * pow2(k - 1));
  if (k >= -126) return f32(y * pow2(k));
  return f32(f32(y * pow2(k + 64)) * pow2(-64));
}

/**
 * exp(x) in float32, as offramp_exp computes it. The common range (−87 ≤ x ≤ 88, where k lies in
 * −126 … 127) is written out here, small enough for the JavaScript compiler to inline it into the
 * scores, so no call boxes its result; the rest goes to expWide. Same operations, same bits.
 */
export function exp32(x: number): number {
  x = f32(x);
  if (!(x >= -87 && x <= 88)) return expWide(x);
  const t = f32(x * LOG2E);
  const k = Math.trunc(f32(t + (t < 0 ? -0.5 : 0.5)));
  const hi = f32(x - k * LN2_HI), lo = f32(k * LN2_LO);   // k·LN2_HI is exact (|k| ≤ 127): no rounding to write
  const r = f32(hi - lo);
  const p = f32(E2 + f32(r * f32(E3 + f32(r * f32(E4 + f32(r * f32(E5 + f32(r * f32(E6 + f32(r * E7))))))))));
  return f32(f32(1 + f32(hi + f32(f32(f32(r * r) * p) - lo))) * POW2[k + 126]);
}

// 2/(2n+1) for n = 1 … 4: log(1+f) = 2 atanh(s), s = f/(2+f), |s| ≤ 0.1716, s² ≤ 0.0295
const L1 = f32(2 / 3), L2 = f32(2 / 5), L3 = f32(2 / 7), L4 = f32(2 / 9);

/**
 * log of a positive normal float32 given by its bits u (times 2^k0 more): x = 2^k · m with
 * √½ ≤ m < √2, f = m − 1 (exact), s = f / (2 + f), log m = f − (f²/2 − s·(f²/2 + R)) with
 * R = 2s²/3 + 2s⁴/5 + 2s⁶/7 + 2s⁸/9 (the series of 2 atanh s less its first term, rearranged so that
 * the exact f leads), plus k ln2 in two parts.
 */
function logBits(u: number, k0: number): number {
  let k = k0 + (u >>> 23) - 127;
  let m = u & 0x007fffff;
  // mantissas at or above √2's (0x3504f3) are halved into [√½, 1)
  if (m >= 0x3504f3) { m |= 0x3f000000; k += 1; } else m |= 0x3f800000;
  const f = f32(fromBits32(m) - 1);
  const s = f32(f / f32(2 + f));
  const z = f32(s * s);
  const R = f32(z * f32(L1 + f32(z * f32(L2 + f32(z * f32(L3 + f32(z * L4)))))));
  const hfsq = f32(f32(0.5 * f) * f);
  const lm = f32(f - f32(hfsq - f32(s * f32(hfsq + R))));
  if (k === 0) return lm;
  return f32(f32(k * LN2_HI) + f32(lm + f32(k * LN2_LO)));
}

/** log of what is not a positive normal float32: NaN, negative, zero, infinity, subnormal (scaled by 2^25 first). */
function logWide(x: number): number {
  if (x !== x || x < 0) return NaN;
  if (x === 0) return -Infinity;
  if (x === Infinity) return x;
  return logBits(toBits32(f32(x * 33554432)), -25);
}

/** log(x) in float32, as offramp_log computes it (logBits; positive normal x inline, the rest logWide). */
export function log32(x: number): number {
  x = f32(x);
  const u = toBits32(x);
  return u >= 0x00800000 && u < 0x7f800000 ? logBits(u, 0) : logWide(x);
}

/** √x in float32 (correctly rounded, as IEEE 754 requires of a float32 unit's square root). */
export const sqrt32 = (x: number): number => f32(Math.sqrt(f32(x)));

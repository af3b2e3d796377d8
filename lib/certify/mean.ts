// Variance-adaptive upper confidence bounds on the mean of bounded values, for
// evidence that comes as fractions (a scene's net share of lost frames, in
// [−1, 1]). Hoeffding-type bounds pay for the whole range whatever the spread;
// when most values sit at one point (most scenes lose nothing) these pay for the
// spread actually seen. Both hold for independent values with a common mean
// (the betting bound for any sequence whose conditional mean given the past is
// at most the mean bounded). Values are rescaled from [lo, hi] to [0, 1].

function scaled(xs: ArrayLike<number>, lo: number, hi: number): Float64Array {
  if (!(hi > lo)) throw new RangeError(`the range [${lo}, ${hi}] is empty`);
  const y = new Float64Array(xs.length);
  for (let i = 0; i < xs.length; i++) {
    const v = (xs[i] - lo) / (hi - lo);
    if (!(v >= -1e-12 && v <= 1 + 1e-12)) throw new RangeError(`value ${xs[i]} lies outside [${lo}, ${hi}]`);
    y[i] = Math.min(1, Math.max(0, v));
  }
  return y;
}

const checkDelta = (delta: number) => { if (!(delta > 0 && delta < 1)) throw new RangeError(`δ must lie strictly between 0 and 1, not ${delta}`); };

/**
 * Empirical Bernstein bound (Maurer & Pontil 2009, "Empirical Bernstein bounds and sample variance
 * penalization", Theorem 4): for n ≥ 2 independent values in [0, 1], with probability ≥ 1 − δ
 *   E X ≤ X̄ + √(2·V·ln(2/δ)/n) + 7·ln(2/δ) / (3·(n − 1)),
 * V the sample variance with denominator n − 1. On [lo, hi] the bound scales by hi − lo:
 *   E X ≤ X̄ + √(2·V·ln(2/δ)/n) + 7·(hi − lo)·ln(2/δ) / (3·(n − 1)).
 * Capped at hi; with fewer than 2 values, hi.
 */
export function empiricalBernsteinUpper(xs: ArrayLike<number>, delta: number, lo = 0, hi = 1): number {
  checkDelta(delta);
  const y = scaled(xs, lo, hi), n = y.length;
  if (n < 2) return hi;
  let mean = 0;
  for (let i = 0; i < n; i++) mean += y[i];
  mean /= n;
  let ss = 0;
  for (let i = 0; i < n; i++) ss += (y[i] - mean) ** 2;
  const v = ss / (n - 1), l = Math.log(2 / delta);
  const u = mean + Math.sqrt((2 * v * l) / n) + (7 * l) / (3 * (n - 1));
  return lo + (hi - lo) * Math.min(1, u);
}

/** The truncation of the bets (Waudby-Smith & Ramdas suggest 1/2 or 3/4): a bet never risks more than this share of the capital. */
export const BET_CAP = 0.75;

/**
 * The predictable plug-in bets of Waudby-Smith & Ramdas 2023 ("Estimating means of bounded random variables
 * by betting", JRSS B; the fixed-n form of their predictable plug-in, eq. (26) with ln(1/δ) for one side):
 *   λ_t = √(2·ln(1/δ) / (n·σ̂²_{t−1})),  σ̂²_t = (1/4 + Σ_{i≤t} (x_i − μ̂_i)²)/(t + 1),  μ̂_t = (1/2 + Σ_{i≤t} x_i)/(t + 1).
 * Each λ_t reads only the values before t, so the capital below is a supermartingale under the null.
 */
function bets(y: Float64Array, delta: number): Float64Array {
  const n = y.length, lam = new Float64Array(n), l = Math.log(1 / delta);
  let sum = 0, ss = 0;
  for (let t = 0; t < n; t++) {
    const s2 = (0.25 + ss) / (t + 1);
    lam[t] = Math.sqrt((2 * l) / (n * s2));
    sum += y[t];
    const mu = (0.5 + sum) / (t + 2);
    ss += (y[t] - mu) ** 2;
  }
  return lam;
}

/**
 * Whether the betting test rejects "mean ≥ m" at level δ: the capital of a gambler betting that the values fall
 * below m, K_t(m) = Π_{i≤t} (1 + λ_i(m)·(m − x_i)) with λ_i(m) = min(λ_i, BET_CAP/(1 − m)), reaches 1/δ at some t ≤ n.
 * Under the null each factor has mean ≤ 1 and is ≥ 0, so by Ville's inequality this happens with probability ≤ δ.
 * K_t(m) grows with m (each factor does), so the values of m not rejected form an interval [0, U).
 */
function rejects(y: Float64Array, lam: Float64Array, m: number, delta: number): boolean {
  const goal = Math.log(1 / delta), cap = m < 1 ? BET_CAP / (1 - m) : Infinity;
  let logK = 0;
  for (let t = 0; t < y.length; t++) {
    logK += Math.log1p(Math.min(lam[t], cap) * (m - y[t]));
    if (logK >= goal) return true;
  }
  return false;
}

/**
 * Betting upper confidence bound on the mean (Waudby-Smith & Ramdas 2023; one-sided: of their two capital processes
 * only the one betting on values below m, at level δ instead of hedging both; from memory of their Section 4), with the
 * predictable plug-in bets above: the least m that the test rejects, found by bisection to
 * 1e-9 of the range and rounded up; the values are used in their given order (fixed before they are seen).
 */
export function bettingUpper(xs: ArrayLike<number>, delta: number, lo = 0, hi = 1): number {
  checkDelta(delta);
  const y = scaled(xs, lo, hi), n = y.length;
  if (n === 0) return hi;
  const lam = bets(y, delta);
  let a = 0, b = 1;
  if (!rejects(y, lam, b, delta)) return hi;
  let mean = 0;
  for (let i = 0; i < n; i++) mean += y[i];
  mean /= n;
  // the mean itself is almost never rejected; start there when it is not
  if (!rejects(y, lam, mean, delta)) a = mean;
  while (b - a > 1e-9) {
    const mid = (a + b) / 2;
    if (rejects(y, lam, mid, delta)) b = mid; else a = mid;
  }
  return lo + (hi - lo) * b;
}

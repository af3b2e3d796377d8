// The Hoeffding–Bentkus p-value for the mean of a loss bounded in [0, 1]
// (Bates, Angelopoulos, Lei, Malik & Jordan 2021, "Distribution-free,
// risk-controlling prediction sets", the bound Learn-then-Test uses). Unlike
// the binomial limits it holds for losses that are fractions (a scene's share
// of lost frames), and it is nearly as tight as the binomial when losses are rare.
import { binomialCdf } from './binomial.js';

/** Bernoulli relative entropy h1(a, b) = a ln(a/b) + (1−a) ln((1−a)/(1−b)). */
function h1(a: number, b: number): number {
  const t = (x: number, y: number) => (x === 0 ? 0 : x * Math.log(x / y));
  return t(a, b) + t(1 - a, 1 - b);
}

/**
 * p-value of H0: E[loss] > bound, from the mean `mean` of n independent losses in [0, 1].
 * min(exp(−n·h1(min(mean, bound), bound)), e·P(Bin(n, bound) ≤ ⌈n·mean⌉)).
 */
export function hoeffdingBentkusP(mean: number, n: number, bound: number): number {
  if (n <= 0) return 1;
  if (bound >= 1) return 1;
  if (bound <= 0) return mean <= 0 ? 1 : 1; // nothing is certified at a zero bound
  const hoeffding = Math.exp(-n * h1(Math.min(mean, bound), bound));
  const bentkus = Math.E * binomialCdf(Math.ceil(n * mean - 1e-9), n, bound);
  return Math.min(1, hoeffding, bentkus);
}

/** The smallest bound that the Hoeffding–Bentkus test certifies at level δ (bisection; the p-value falls as the bound rises). */
export function hoeffdingBentkusUpper(mean: number, n: number, delta: number): number {
  if (!(delta > 0 && delta < 1)) throw new RangeError(`δ must lie strictly between 0 and 1, not ${delta}`);
  if (n <= 0) return 1;
  let lo = Math.max(0, Math.min(1, mean)), hi = 1;
  if (hoeffdingBentkusP(mean, n, lo) <= delta) return lo;
  for (let i = 0; i < 100 && hi - lo > 1e-12; i++) {
    const mid = (lo + hi) / 2;
    if (hoeffdingBentkusP(mean, n, mid) <= delta) hi = mid; else lo = mid;
  }
  return hi;
}

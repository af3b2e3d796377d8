// Per-exit scores over one exit's logits: the arithmetic an exit decision runs.
// Each works on (array, offset, count) so a C port takes (const float *z, int n)
// and mirrors it line by line; all sums are float64 whatever the input type.
// Ties go to the lowest index (as numpy.argmax does), so every port agrees.

/** Index of the largest logit (first one on ties). */
export function argmax(z: ArrayLike<number>, off: number, n: number): number {
  let best = 0;
  let m = z[off];
  for (let i = 1; i < n; i++) if (z[off + i] > m) { m = z[off + i]; best = i; }
  return best;
}

/** Softmax into `out[0..n)`: max-subtracted so exp never overflows, float64 sum. */
export function softmax(z: ArrayLike<number>, off: number, n: number, out: Float64Array): Float64Array {
  let m = z[off];
  for (let i = 1; i < n; i++) if (z[off + i] > m) m = z[off + i];
  let s = 0;
  for (let i = 0; i < n; i++) { const e = Math.exp(z[off + i] - m); out[i] = e; s += e; }
  const r = 1 / s;
  for (let i = 0; i < n; i++) out[i] *= r;
  return out;
}

/** Top-1 softmax probability, without normalising the vector: 1 / Σ exp(zᵢ − max). */
export function confidence(z: ArrayLike<number>, off: number, n: number): number {
  let m = z[off];
  for (let i = 1; i < n; i++) if (z[off + i] > m) m = z[off + i];
  let s = 0;
  for (let i = 0; i < n; i++) s += Math.exp(z[off + i] - m);
  return 1 / s;
}

/** Top-1 minus top-2 softmax probability: (1 − exp(z₂ − z₁)) / Σ exp(zᵢ − z₁). 1 for a single class. */
export function margin(z: ArrayLike<number>, off: number, n: number): number {
  if (n < 2) return 1;
  let i1 = 0, i2 = -1;
  for (let i = 1; i < n; i++) {
    const v = z[off + i];
    if (v > z[off + i1]) { i2 = i1; i1 = i; } else if (i2 < 0 || v > z[off + i2]) i2 = i;
  }
  const m = z[off + i1];
  let s = 0;
  for (let i = 0; i < n; i++) s += Math.exp(z[off + i] - m);
  return (1 - Math.exp(z[off + i2] - m)) / s;
}

/**
 * Normalised entropy H(p) / ln n of the softmax, in [0, 1] (BranchyNet, Teerapittayanon et al.
 * 2016, divided by its maximum so one threshold scale fits any class count). With dᵢ = zᵢ − max,
 * eᵢ = exp dᵢ and s = Σ eᵢ: H = ln s − Σ eᵢ dᵢ / s, one log instead of n. Clamped to [0, 1]
 * because rounding can put a uniform vector a few ulps above 1, and τ = 1 must mean "always".
 */
export function entropy(z: ArrayLike<number>, off: number, n: number): number {
  if (n < 2) return 0;
  let m = z[off];
  for (let i = 1; i < n; i++) if (z[off + i] > m) m = z[off + i];
  let s = 0, t = 0;
  for (let i = 0; i < n; i++) { const d = z[off + i] - m; const e = Math.exp(d); s += e; t += e * d; }
  const h = (Math.log(s) - t / s) / Math.log(n);
  return h < 0 ? 0 : h > 1 ? 1 : h;
}

/** Shannon entropy of a probability vector in nats (0·ln 0 = 0); the reference form for tests. */
export function entropyOfProbs(p: ArrayLike<number>): number {
  let h = 0;
  for (let i = 0; i < p.length; i++) if (p[i] > 0) h -= p[i] * Math.log(p[i]);
  return h;
}

// Per-exit scores over one exit's logits: the arithmetic an exit decision runs.
// Each works on (array, offset, count) so the C (lib/emit/c/offramp_decide.c) takes
// (const float *z) and mirrors it line by line. Everything is float32, as on a Cortex-M4F:
// logits are read as float32, every operation is rounded to float32 (f32.ts), and exp/log
// are exp32/log32, so the C gives the same bits and the tuner's thresholds are the scores
// the device computes. Ties go to the lowest index (as numpy.argmax does), so every port agrees.
import * as F from './f32.js';

// Local bindings, read once: a test runner that rewrites imports into property reads would
// otherwise pay one per operation of these float32 inner loops.
const f32 = Math.fround, exp32 = F.exp32, log32 = F.log32;

/** Index of the largest logit (first one on ties). */
export function argmax(z: ArrayLike<number>, off: number, n: number): number {
  let best = 0;
  let m = f32(z[off]);
  for (let i = 1; i < n; i++) { const v = f32(z[off + i]); if (v > m) { m = v; best = i; } }
  return best;
}

const maxOf = (z: ArrayLike<number>, off: number, n: number): number => {
  let m = f32(z[off]);
  for (let i = 1; i < n; i++) { const v = f32(z[off + i]); if (v > m) m = v; }
  return m;
};

/** Softmax into `out[0..n)`: max-subtracted so exp never overflows; one reciprocal, then n products. */
export function softmax(z: ArrayLike<number>, off: number, n: number, out: Float32Array): Float32Array {
  const m = maxOf(z, off, n);
  let s = 0;
  for (let i = 0; i < n; i++) { const e = exp32(f32(z[off + i]) - m); out[i] = e; s = f32(s + e); }
  const r = f32(1 / s);
  for (let i = 0; i < n; i++) out[i] = f32(out[i] * r);
  return out;
}

/** Top-1 softmax probability, without normalising the vector: 1 / Σ exp(zᵢ − max). */
export function confidence(z: ArrayLike<number>, off: number, n: number): number {
  const m = maxOf(z, off, n);
  let s = 0;
  for (let i = 0; i < n; i++) s = f32(s + exp32(f32(z[off + i]) - m));
  return f32(1 / s);
}

/** Top-1 minus top-2 softmax probability: (1 − exp(z₂ − z₁)) / Σ exp(zᵢ − z₁). 1 for a single class. */
export function margin(z: ArrayLike<number>, off: number, n: number): number {
  if (n < 2) return 1;
  let i1 = 0, i2 = -1;
  for (let i = 1; i < n; i++) {
    const v = f32(z[off + i]);
    if (v > f32(z[off + i1])) { i2 = i1; i1 = i; } else if (i2 < 0 || v > f32(z[off + i2])) i2 = i;
  }
  const m = f32(z[off + i1]);
  let s = 0;
  for (let i = 0; i < n; i++) s = f32(s + exp32(f32(z[off + i]) - m));
  return f32(f32(1 - exp32(f32(z[off + i2]) - m)) / s);
}

/**
 * Normalised entropy H(p) / ln n of the softmax, in [0, 1] (BranchyNet, Teerapittayanon et al.
 * 2016, divided by its maximum so one threshold scale fits any class count). With dᵢ = zᵢ − max,
 * eᵢ = exp dᵢ and s = Σ eᵢ: H = ln s − Σ eᵢ dᵢ / s, one log instead of n. Clamped to [0, 1]
 * because rounding can put a uniform vector a few ulps above 1, and τ = 1 must mean "always".
 */
export function entropy(z: ArrayLike<number>, off: number, n: number): number {
  if (n < 2) return 0;
  const m = maxOf(z, off, n);
  let s = 0, t = 0;
  for (let i = 0; i < n; i++) { const d = f32(f32(z[off + i]) - m); const e = exp32(d); s = f32(s + e); t = f32(t + f32(e * d)); }
  const h = f32(f32(log32(s) - f32(t / s)) / log32(n));
  return h < 0 ? 0 : h > 1 ? 1 : h;
}

/** Shannon entropy of a probability vector in nats (0·ln 0 = 0); the reference form for tests, float64. */
export function entropyOfProbs(p: ArrayLike<number>): number {
  let h = 0;
  for (let i = 0; i < p.length; i++) if (p[i] > 0) h -= p[i] * Math.log(p[i]);
  return h;
}

// What a head is fitted to, and how fits are scored: hard labels (cross-entropy)
// or the model's own final output softened at a temperature (knowledge
// distillation, Hinton et al. 2015); a seeded held-out split; accuracy/agreement.
import { mulberry32 } from '../graph/build.js';

/** Features of n samples, d each, row-major; float32 as they come from the runtime. */
export interface Features { X: Float32Array | Float64Array; n: number; d: number }

export type Targets =
  | { kind: 'labels'; labels: Int32Array; k: number }
  /** p: n×k probabilities, softmax(teacher/T) */
  | { kind: 'soft'; p: Float64Array; k: number; temperature: number };

export function labelTargets(labels: ArrayLike<number>, k: number): Targets {
  return { kind: 'labels', labels: Int32Array.from(labels), k };
}

/** softmax(z/T) of teacher logits (n×k), in float64. */
export function softTargets(logits: ArrayLike<number>, n: number, k: number, temperature = 1): Targets {
  const p = new Float64Array(n * k);
  for (let i = 0; i < n; i++) {
    let mx = -Infinity;
    for (let j = 0; j < k; j++) mx = Math.max(mx, logits[i * k + j] / temperature);
    let s = 0;
    for (let j = 0; j < k; j++) s += (p[i * k + j] = Math.exp(logits[i * k + j] / temperature - mx));
    for (let j = 0; j < k; j++) p[i * k + j] /= s;
  }
  return { kind: 'soft', p, k, temperature };
}

export function argmaxRows(z: ArrayLike<number>, n: number, k: number): Int32Array {
  const out = new Int32Array(n);
  for (let i = 0; i < n; i++) {
    let b = 0;
    for (let j = 1; j < k; j++) if (z[i * k + j] > z[i * k + b]) b = j;
    out[i] = b;
  }
  return out;
}

export interface Split { train: Int32Array; held: Int32Array }

/** A seeded shuffle; the first ⌊fraction·n⌋ become the held-out rows. Both parts in ascending order. */
export function heldOutSplit(n: number, fraction: number, seed: number): Split {
  const idx = Int32Array.from({ length: n }, (_, i) => i);
  const rnd = mulberry32(seed ^ 0x5eed);
  for (let i = n - 1; i > 0; i--) { const j = Math.floor(rnd() * (i + 1)); const t = idx[i]; idx[i] = idx[j]; idx[j] = t; }
  const h = fraction > 0 && n > 1 ? Math.min(n - 1, Math.floor(fraction * n)) : 0;
  return { held: idx.slice(0, h).sort(), train: idx.slice(h).sort() };
}

export const allRows = (n: number) => Int32Array.from({ length: n }, (_, i) => i);

/** Share of rows where the predicted class equals `truth`. */
export function matchRate(pred: Int32Array, truth: ArrayLike<number>, rows: Int32Array): number {
  if (!rows.length) return NaN;
  let hit = 0;
  for (const r of rows) if (pred[r] === truth[r]) hit++;
  return hit / rows.length;
}

/**
 * One row's loss and its gradient with respect to the raw logits z, given s = z/T.
 * Labels (T = 1): cross-entropy, dz = q − onehot. Soft targets: T²·KL(p‖softmax(s)),
 * dz = T·(q − p), the T² keeping gradients on the labels' scale (knowledge distillation).
 * `e` is scratch of length k and receives dz.
 */
export function rowLoss(s: ArrayLike<number>, e: Float64Array, k: number, T: Targets, r: number, temp: number): number {
  let mx = -Infinity;
  for (let c = 0; c < k; c++) if (s[c] > mx) mx = s[c];
  let sum = 0;
  for (let c = 0; c < k; c++) sum += (e[c] = Math.exp(s[c] - mx));
  const lse = mx + Math.log(sum);
  if (T.kind === 'labels') {
    const y = T.labels[r];
    for (let c = 0; c < k; c++) e[c] = e[c] / sum - (c === y ? 1 : 0);
    return lse - s[y];
  }
  let kl = 0;
  for (let c = 0; c < k; c++) {
    const p = T.p[r * k + c];
    if (p > 0) kl += p * (Math.log(p) - (s[c] - lse));
    e[c] = temp * (e[c] / sum - p);
  }
  return temp * temp * kl;
}

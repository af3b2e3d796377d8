// Distances between two softmax vectors of n classes, for the stream policies:
// how far a frame's exit output has moved from the scene's reference.
// Jensen–Shannon is the divergence (not its square root) in bits, so it lies in [0, 1].
// float32 throughout, as scores.ts (and the C that mirrors both) computes.
import * as F from './f32.js';

// local bindings, read once (see scores.ts)
const f32 = Math.fround, log32 = F.log32, sqrt32 = F.sqrt32;

export type DistanceKind = 'l1' | 'l2' | 'cosine' | 'js';
export const DISTANCES: readonly DistanceKind[] = ['l1', 'l2', 'cosine', 'js'];

// Each distance reads p from offset po and q from qo (the tuner keeps every frame's softmax in one array);
// the plain forms below read both from 0.

/** Σ |pᵢ − qᵢ|, in [0, 2]. */
export function l1At(p: ArrayLike<number>, po: number, q: ArrayLike<number>, qo: number, n: number): number {
  let s = 0;
  for (let i = 0; i < n; i++) s = f32(s + Math.abs(f32(f32(p[po + i]) - f32(q[qo + i]))));
  return s;
}

/** √Σ (pᵢ − qᵢ)², in [0, √2]. */
export function l2At(p: ArrayLike<number>, po: number, q: ArrayLike<number>, qo: number, n: number): number {
  let s = 0;
  for (let i = 0; i < n; i++) { const d = f32(f32(p[po + i]) - f32(q[qo + i])); s = f32(s + f32(d * d)); }
  return sqrt32(s);
}

/** 1 − p·q / √(‖p‖² ‖q‖²), in [0, 1] for non-negative vectors. */
export function cosineAt(p: ArrayLike<number>, po: number, q: ArrayLike<number>, qo: number, n: number): number {
  let pq = 0, pp = 0, qq = 0;
  for (let i = 0; i < n; i++) {
    const a = f32(p[po + i]), b = f32(q[qo + i]);
    pq = f32(pq + f32(a * b)); pp = f32(pp + f32(a * a)); qq = f32(qq + f32(b * b));
  }
  return f32(1 - f32(pq / sqrt32(f32(pp * qq))));
}

/** 1 / (2 ln 2) in float32: half the sum of two KL terms, from nats to bits. */
export const JS_SCALE = f32(0.5 / Math.LN2);

/**
 * Jensen–Shannon divergence in bits: ½ KL(p‖m) + ½ KL(q‖m), m = (p + q) / 2; 0·log 0 = 0.
 * Bounded by 1 bit (disjoint supports), 0 iff p = q.
 */
export function jsAt(p: ArrayLike<number>, po: number, q: ArrayLike<number>, qo: number, n: number): number {
  let s = 0;
  for (let i = 0; i < n; i++) {
    const a = f32(p[po + i]), b = f32(q[qo + i]);
    const m = f32(0.5 * f32(a + b));
    if (a > 0) s = f32(s + f32(a * log32(f32(a / m))));
    if (b > 0) s = f32(s + f32(b * log32(f32(b / m))));
  }
  return f32(s * JS_SCALE);
}

export const l1 = (p: ArrayLike<number>, q: ArrayLike<number>, n: number): number => l1At(p, 0, q, 0, n);
export const l2 = (p: ArrayLike<number>, q: ArrayLike<number>, n: number): number => l2At(p, 0, q, 0, n);
export const cosine = (p: ArrayLike<number>, q: ArrayLike<number>, n: number): number => cosineAt(p, 0, q, 0, n);
export const js = (p: ArrayLike<number>, q: ArrayLike<number>, n: number): number => jsAt(p, 0, q, 0, n);

/** The distance `kind` between p (from po) and q (from qo). */
export function distanceAt(kind: DistanceKind, p: ArrayLike<number>, po: number, q: ArrayLike<number>, qo: number, n: number): number {
  switch (kind) {
    case 'l1': return l1At(p, po, q, qo, n);
    case 'l2': return l2At(p, po, q, qo, n);
    case 'cosine': return cosineAt(p, po, q, qo, n);
    case 'js': return jsAt(p, po, q, qo, n);
  }
}

export function distance(kind: DistanceKind, p: ArrayLike<number>, q: ArrayLike<number>, n: number): number {
  return distanceAt(kind, p, 0, q, 0, n);
}

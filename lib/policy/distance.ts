// Distances between two softmax vectors of n classes, for the stream policies:
// how far a frame's exit output has moved from the scene's reference.
// Jensen–Shannon is the divergence (not its square root) in bits, so it lies in [0, 1].

export type DistanceKind = 'l1' | 'l2' | 'cosine' | 'js';
export const DISTANCES: readonly DistanceKind[] = ['l1', 'l2', 'cosine', 'js'];

/** Σ |pᵢ − qᵢ|, in [0, 2]. */
export function l1(p: ArrayLike<number>, q: ArrayLike<number>, n: number): number {
  let s = 0;
  for (let i = 0; i < n; i++) s += Math.abs(p[i] - q[i]);
  return s;
}

/** √Σ (pᵢ − qᵢ)², in [0, √2]. */
export function l2(p: ArrayLike<number>, q: ArrayLike<number>, n: number): number {
  let s = 0;
  for (let i = 0; i < n; i++) { const d = p[i] - q[i]; s += d * d; }
  return Math.sqrt(s);
}

/** 1 − p·q / (‖p‖ ‖q‖), in [0, 1] for non-negative vectors. */
export function cosine(p: ArrayLike<number>, q: ArrayLike<number>, n: number): number {
  let pq = 0, pp = 0, qq = 0;
  for (let i = 0; i < n; i++) { pq += p[i] * q[i]; pp += p[i] * p[i]; qq += q[i] * q[i]; }
  return 1 - pq / Math.sqrt(pp * qq);
}

/**
 * Jensen–Shannon divergence in bits: ½ KL(p‖m) + ½ KL(q‖m), m = (p + q) / 2; 0·log 0 = 0.
 * Bounded by 1 bit (disjoint supports), 0 iff p = q.
 */
export function js(p: ArrayLike<number>, q: ArrayLike<number>, n: number): number {
  let s = 0;
  for (let i = 0; i < n; i++) {
    const m = 0.5 * (p[i] + q[i]);
    if (p[i] > 0) s += p[i] * Math.log(p[i] / m);
    if (q[i] > 0) s += q[i] * Math.log(q[i] / m);
  }
  return s * (0.5 / Math.LN2);
}

export function distance(kind: DistanceKind, p: ArrayLike<number>, q: ArrayLike<number>, n: number): number {
  switch (kind) {
    case 'l1': return l1(p, q, n);
    case 'l2': return l2(p, q, n);
    case 'cosine': return cosine(p, q, n);
    case 'js': return js(p, q, n);
  }
}

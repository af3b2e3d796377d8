// The arithmetic of a decision, counted as the functions in scores.ts and
// distance.ts do it, for a vector of n classes. `macs` are multiply-accumulates,
// `ops` everything else (compare, add, exp, log, divide, sqrt, abs). Expected
// cost adds them as MAC-equivalents (one each): on a Cortex-M a float compare
// or add costs about what a MAC does, and exp/log are few next to a stage.
import type { DistanceKind } from './distance.js';

export interface Ops { macs: number; ops: number }
export const units = (o: Ops): number => o.macs + o.ops;
const add = (...xs: Ops[]): Ops => ({ macs: xs.reduce((a, x) => a + x.macs, 0), ops: xs.reduce((a, x) => a + x.ops, 0) });
const CMP: Ops = { macs: 0, ops: 1 };

/** max (n−1), subtract/exp/sum (3n), reciprocal (1), scale (n). */
export const softmaxOps = (n: number): Ops => ({ macs: 0, ops: 5 * n });
export const argmaxOps = (n: number): Ops => ({ macs: 0, ops: n - 1 });
/** max (n−1), subtract/exp/sum (3n), reciprocal (1). */
export const confidenceOps = (n: number): Ops => ({ macs: 0, ops: 4 * n });
/** top-2 scan (2n−2), subtract/exp/sum (3n), then 1 − exp(z₂ − z₁) over s (4). */
export const marginOps = (n: number): Ops => (n < 2 ? { macs: 0, ops: 0 } : { macs: 0, ops: 5 * n + 2 });
/** max (n−1), subtract/exp/sum (3n), e·d (n MACs), log, divide, subtract, scale by 1/ln n (4), clamp (2). */
export const entropyOps = (n: number): Ops => (n < 2 ? { macs: 0, ops: 0 } : { macs: n, ops: 4 * n + 5 });
/** argmax, compare with the last label, update the run, compare with p. */
export const patienceOps = (n: number): Ops => add(argmaxOps(n), { macs: 0, ops: 3 });

/** One score-and-threshold decision at an exit. */
export function scoreDecisionOps(kind: 'confidence' | 'entropy' | 'margin', n: number): Ops {
  const s = kind === 'confidence' ? confidenceOps(n) : kind === 'entropy' ? entropyOps(n) : marginOps(n);
  return add(s, CMP);
}

/** A distance between two softmax vectors (the softmax itself not included). */
export function distanceOps(kind: DistanceKind, n: number): Ops {
  switch (kind) {
    case 'l1': return { macs: 0, ops: 3 * n };              // subtract, abs, sum
    case 'l2': return { macs: n, ops: n + 1 };              // subtract, square-accumulate, sqrt
    case 'cosine': return { macs: 3 * n, ops: 4 };          // three dot products; multiply, sqrt, divide, subtract
    case 'js': return { macs: 2 * n, ops: 8 * n + 1 };      // mean (add, halve), two guards, two divides, two logs; scale to bits
  }
}

/** The stream comparison at an exit: softmax, distance, threshold compare (+ label check for `agreeing`). */
export function compareOps(kind: DistanceKind, n: number, agreeing: boolean): Ops {
  return add(softmaxOps(n), distanceOps(kind, n), CMP, agreeing ? add(argmaxOps(n), CMP) : { macs: 0, ops: 0 });
}

// What a tuned setting promises on new data, and what the promise rests on.
// The search part picks candidates; a disjoint certification part tests them
// in a fixed order (lib/certify), so the printed bound survives the winner's curse.

import { roundNoise } from '../util/json.js';

export interface Guarantee {
  /** C: the bound holds with probability ≥ C over the draw of the tuning data */
  confidence: number;
  /** the promise asked for, percentage points */
  maxDrop: number;
  /** whether the chosen setting itself is certified (false: the full model was kept) */
  certified: boolean;
  /** what one piece of evidence is */
  unit: 'samples' | 'scenes';
  /** labelled samples (or scenes) in the certification part */
  evidence: number;
  /** unlabelled rows that tightened the disagreement term */
  unlabelled: number;
  /** observed drop on the certification part, percentage points */
  estimate: number;
  /** certified upper bound on the drop, percentage points */
  bound: number;
  /** how the bound was made */
  method: string;
  /** maxDrop − bound, percentage points; how far the setting sits inside the promise */
  margin: number;
  /** settings tested in the fixed sequence and how many passed */
  tested: number;
  passed: number;
  /** for the boldest setting that failed: samples (or scenes) the same rates would need to pass */
  needed?: number;
  /** the first setting the fixed sequence could not certify (one step bolder than what passed), percentage points */
  next?: { policy: unknown; estimate: number; bound: number; needed?: number };
  /** the chosen setting's observed drop with every threshold nudged one grid step cheaper, percentage points (robustness) */
  nudged?: number;
  /** what the bound assumes, in words, for the reports */
  assumes: string[];
}

/** The guarantee as recorded: observed drops (differences of measured shares) lose their floating-point noise; bounds stay as computed. */
export function recordedGuarantee(g: Guarantee): Guarantee {
  const r = (x: number) => roundNoise(x);
  return {
    ...g, estimate: r(g.estimate),
    ...(g.nudged !== undefined && { nudged: r(g.nudged) }),
    ...(g.next && { next: { ...g.next, estimate: r(g.next.estimate) } }),
  };
}

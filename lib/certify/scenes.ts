// A certified bound on a stream policy's drop when the evidence comes in scenes.
// Frames of one scene are not independent (a missed scene change loses a run of
// them together), so the unit of evidence is the scene: each scene contributes
// the share of its frames the policy lost against the full model, a number in
// [0, 1], and the Hoeffding–Bentkus bound (bentkus.ts) holds for means of such
// shares. The promise is therefore about the scene-averaged drop: the mean, over
// scenes, of the share of a scene's frames lost. With labels the paired share
// (full right & policy wrong, minus the reverse) is bounded as an upper limit on
// the lost share minus a lower limit on the gained share, δ/2 each.
import { hoeffdingBentkusUpper } from './bentkus.js';

/** Per-scene shares averaged over the scenes of the certification part. */
export interface SceneShares {
  /** scenes */
  n: number;
  /** mean over scenes of the share of frames where the full model is right and the policy wrong (unlabelled: where they disagree) */
  lost: number;
  /** mean over scenes of the share of frames where the full model is wrong and the policy right (0 without labels) */
  gained: number;
  labelled: boolean;
}

export interface SceneBound { estimate: number; bound: number; delta: number; method: string }

/**
 * Upper confidence bound, as a fraction, on the scene-averaged drop; holds with probability ≥ 1 − δ if scenes are
 * independent. `lostOnly` (labelled): bound the lost share alone at δ, the drop being at most it — tighter when
 * little is gained; which of the two to use must be fixed before the shares are seen.
 */
export function sceneDropBound(s: SceneShares, delta: number, lostOnly = false): SceneBound {
  if (!(delta > 0 && delta < 1)) throw new RangeError(`δ must lie strictly between 0 and 1, not ${delta}`);
  if (s.n <= 0) return { estimate: 0, bound: 1, delta, method: 'no scenes' };
  if (!s.labelled) return { estimate: s.lost, bound: hoeffdingBentkusUpper(s.lost, s.n, delta), delta, method: 'Hoeffding–Bentkus on per-scene disagreement shares' };
  if (lostOnly) return { estimate: s.lost - s.gained, bound: hoeffdingBentkusUpper(s.lost, s.n, delta), delta, method: 'Hoeffding–Bentkus on per-scene lost shares' };
  const lostU = hoeffdingBentkusUpper(s.lost, s.n, delta / 2);
  // a lower limit on the mean gained share: the upper limit on the mean of 1 − share
  const gainedL = Math.max(0, 1 - hoeffdingBentkusUpper(1 - s.gained, s.n, delta / 2));
  return { estimate: s.lost - s.gained, bound: Math.min(1, lostU - gainedL), delta, method: 'Hoeffding–Bentkus on per-scene lost and gained shares (δ/2 each)' };
}

/** Scenes the same shares would need for the bound to reach maxDrop (a fraction); undefined when the estimate itself is not below it. */
export function scenesNeeded(s: SceneShares, maxDrop: number, delta: number, limit = 1e7, lostOnly = false): number | undefined {
  const ok = (n: number) => sceneDropBound({ ...s, n }, delta, lostOnly).bound <= maxDrop;
  if (s.n > 0 && ok(s.n)) return s.n;
  if (!((lostOnly && s.labelled ? s.lost : s.lost - s.gained) < maxDrop)) return undefined;
  let lo = Math.max(1, s.n), hi = lo * 2;
  while (!ok(hi)) { lo = hi; hi *= 2; if (hi > limit) return undefined; }
  while (hi - lo > 1) { const mid = Math.floor((lo + hi) / 2); if (ok(mid)) hi = mid; else lo = mid; }
  return hi;
}

// A certified bound on a stream policy's drop when the evidence comes in scenes.
// Frames of one scene are not independent (a missed scene change loses a run of
// them together), so the unit of evidence is the scene: each scene contributes
// the share of its frames the policy lost against the full model, and the
// promise is about the scene-averaged drop: the mean, over scenes, of a scene's
// net share lost. With labels a scene's net share is (full right & policy wrong)
// − (full wrong & policy right), a number in [−1, 1]; without labels, the share
// of frames where the two disagree, in [0, 1].
//
// The net share is bounded directly, as one paired value per scene: a policy
// that loses a frame in one scene and gains one in another then pays for the
// spread of the net shares, not for two bounds at δ/2 each. The bound is
// variance-adaptive (mean.ts: the betting bound of Waudby-Smith & Ramdas 2023, or
// empirical Bernstein), far tighter than Hoeffding-type bounds when most scenes
// lose nothing; Hoeffding–Bentkus (bentkus.ts) on the lost share alone stays as a
// form, being tighter when losses are rare and never offset. Which form bounds a
// setting is chosen on the search part, before any certifying scene is seen.
import { hoeffdingBentkusUpper } from './bentkus.js';
import { bettingUpper, empiricalBernsteinUpper } from './mean.js';

/** Per-scene shares of the certification (or search) part, in time order. */
export interface SceneShares {
  /** scenes */
  n: number;
  /** mean over scenes of the share of frames where the full model is right and the policy wrong (unlabelled: where they disagree) */
  lost: number;
  /** mean over scenes of the share of frames where the full model is wrong and the policy right (0 without labels) */
  gained: number;
  labelled: boolean;
  /** each scene's lost share, in time order */
  lostEach: Float64Array;
  /** each scene's gained share, in time order (zeros without labels) */
  gainedEach: Float64Array;
}

/**
 * How a drop is bounded: which per-scene values (`net`: lost − gained, labelled only; `lost`: the lost share alone,
 * which is at least the net share, so its mean bounds the drop too) and which bound on their mean.
 */
export type SceneForm = 'net:betting' | 'net:bernstein' | 'lost:betting' | 'lost:bernstein' | 'lost:hb';
export const SCENE_FORMS: Record<'labelled' | 'unlabelled', readonly SceneForm[]> = {
  labelled: ['net:betting', 'net:bernstein', 'lost:betting', 'lost:hb'],
  unlabelled: ['lost:betting', 'lost:bernstein', 'lost:hb'],
};

export interface SceneBound { estimate: number; bound: number; delta: number; form: SceneForm; method: string }

const WORDS: Record<SceneForm, string> = {
  'net:betting': 'betting bound (Waudby-Smith & Ramdas) on per-scene net lost shares',
  'net:bernstein': 'empirical Bernstein bound (Maurer & Pontil) on per-scene net lost shares',
  'lost:betting': 'betting bound (Waudby-Smith & Ramdas) on per-scene lost shares',
  'lost:bernstein': 'empirical Bernstein bound (Maurer & Pontil) on per-scene lost shares',
  'lost:hb': 'Hoeffding–Bentkus on per-scene lost shares',
};

/** The default form: the net share with labels, the disagreement share without. */
export const defaultForm = (s: SceneShares): SceneForm => (s.labelled ? 'net:betting' : 'lost:betting');

/** Per-scene values of a form, the first `n` of them repeated cyclically to `n` (for "scenes needed"). */
function values(s: SceneShares, form: SceneForm, n = s.n): Float64Array {
  const out = new Float64Array(n), net = form.startsWith('net:');
  for (let i = 0; i < n; i++) { const j = i % s.n; out[i] = net ? s.lostEach[j] - s.gainedEach[j] : s.lostEach[j]; }
  return out;
}

/**
 * Upper confidence bound, as a fraction, on the scene-averaged drop; holds with probability ≥ 1 − δ if scenes are
 * independent. The form must be fixed before the shares are seen (on the search part, for the certification part).
 */
export function sceneDropBound(s: SceneShares, delta: number, form: SceneForm = defaultForm(s)): SceneBound {
  if (!(delta > 0 && delta < 1)) throw new RangeError(`δ must lie strictly between 0 and 1, not ${delta}`);
  if (form.startsWith('net:') && !s.labelled) throw new RangeError('net shares need labels');
  const estimate = s.lost - s.gained;
  if (s.n <= 0) return { estimate: 0, bound: 1, delta, form, method: 'no scenes' };
  return { estimate, bound: boundOf(s, delta, form, s.n), delta, form, method: WORDS[form] };
}

function boundOf(s: SceneShares, delta: number, form: SceneForm, n: number): number {
  if (form === 'lost:hb') return hoeffdingBentkusUpper(s.lost, n, delta);
  const lo = form.startsWith('net:') ? -1 : 0, v = values(s, form, n);
  const b = form.endsWith(':betting') ? bettingUpper(v, delta, lo, 1) : empiricalBernsteinUpper(v, delta, lo, 1);
  return Math.min(1, b);
}

/**
 * Scenes the same per-scene shares would need for the bound to reach maxDrop (a fraction): the scenes seen,
 * repeated in order; undefined when the estimate itself is not below it, or beyond `limit`. Advice, not a promise.
 */
export function scenesNeeded(s: SceneShares, maxDrop: number, delta: number, form: SceneForm = defaultForm(s), limit = 200_000): number | undefined {
  if (s.n <= 0) return undefined;
  const ok = (n: number) => boundOf(s, delta, form, n) <= maxDrop;
  if (ok(s.n)) return s.n;
  const mean = form.startsWith('net:') ? s.lost - s.gained : s.lost;
  if (!(mean < maxDrop)) return undefined;
  let lo = s.n, hi = lo * 2;
  while (!ok(hi)) { lo = hi; hi *= 2; if (hi > limit) return undefined; }
  while (hi - lo > Math.max(1, lo * 0.002)) { const mid = Math.floor((lo + hi) / 2); if (ok(mid)) hi = mid; else lo = mid; }
  return hi;
}

// Scenes of a recording: the unit of evidence for stream certification. Given
// segment ids, a change of id starts a scene. Without them, the runs of the full
// model's own answers stand in: a change of answer starts a scene only when the
// new answer holds for `hold` frames, so a flicker of the full model stays inside
// its scene (fewer, longer scenes: less evidence claimed, never more).
import { OfframpError } from '../errors.js';
import { argmax } from '../policy/index.js';
import type { ExitCache } from './cache.js';

export type SceneSource = 'segments' | 'full-model runs';

/** The full model's answer per frame. */
export function fullAnswers(c: ExitCache): Int32Array {
  const E1 = c.exits + 1, out = new Int32Array(c.samples);
  for (let i = 0; i < c.samples; i++) out[i] = argmax(c.logits, (i * E1 + c.exits) * c.classes, c.classes);
  return out;
}

/** Scene number per frame, 0, 1, … in order. */
export function sceneIds(c: ExitCache, segments?: ArrayLike<number>, hold = 3): { ids: Int32Array; count: number; source: SceneSource } {
  const n = c.samples, ids = new Int32Array(n);
  let s = 0;
  if (segments) {
    if (segments.length !== n) throw new OfframpError('data', `${segments.length} segment ids for ${n} frames`);
    for (let i = 1; i < n; i++) { if (segments[i] !== segments[i - 1]) s++; ids[i] = s; }
    return { ids, count: n ? s + 1 : 0, source: 'segments' };
  }
  const a = fullAnswers(c);
  let cur = a[0];
  for (let i = 1; i < n; i++) {
    if (a[i] !== cur) {
      let j = i + 1;
      while (j < n && j < i + hold && a[j] === a[i]) j++;
      if (j - i >= hold || j === n) { s++; cur = a[i]; }
    }
    ids[i] = s;
  }
  return { ids, count: n ? s + 1 : 0, source: 'full-model runs' };
}

/**
 * Search part and certification part, both in time order, cut at the scene boundary nearest to the
 * last ⌊N·heldOut⌋ frames; with a single scene the cut falls inside it (one scene of evidence).
 */
export function sceneSplit(ids: Int32Array, heldOut: number): { tune: Int32Array; held: Int32Array } {
  if (!(heldOut > 0 && heldOut < 1)) throw new OfframpError('usage', `held-out share must lie strictly between 0 and 1, not ${heldOut}`);
  const n = ids.length, target = n - Math.floor(n * heldOut);
  let cut = -1;
  for (let i = 1; i < n; i++) if (ids[i] !== ids[i - 1] && (cut < 0 || Math.abs(i - target) < Math.abs(cut - target))) cut = i;
  if (cut < 0) cut = Math.min(Math.max(target, 1), n - 1);
  const range = (a: number, b: number) => Int32Array.from({ length: Math.max(b - a, 0) }, (_, j) => a + j);
  return { tune: range(0, cut), held: range(cut, n) };
}

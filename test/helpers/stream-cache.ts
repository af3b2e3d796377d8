// Synthetic exit caches of a stream with scenes, for the stream tuner's tests and
// coverage simulations. Each scene has a prototype per exit (syntheticCache's
// sample: deeper exits separate the class further, the full model is wrong on
// hard scenes); each frame is its scene's prototype plus noise. A share of scene
// changes is subtle: the first exit's prototype stays the previous scene's, so a
// policy comparing there misses the change until a deeper look (or a refresh).
import { mulberry32 } from '../../lib/graph/build.js';
import { makeCache, type ExitCache } from '../../lib/tune/cache.js';
import { syntheticCache } from './exit-cache.js';

export interface SceneStream { cache: ExitCache; segments: Int32Array; scenes: number }

export function sceneStream(o: { scenes: number; minLen: number; maxLen: number; exits?: number; classes?: number; noise?: number; subtle?: number; seed: number; unlabelled?: boolean }): SceneStream {
  const E = o.exits ?? 3, C = o.classes ?? 6, E1 = E + 1, W = E1 * C, noise = o.noise ?? 0.15, subtle = o.subtle ?? 0.2;
  const proto = syntheticCache(o.scenes, E, C, o.seed);
  const rnd = mulberry32(o.seed * 7919 + 13);
  const gauss = () => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const lens = Array.from({ length: o.scenes }, () => o.minLen + Math.floor(rnd() * (o.maxLen - o.minLen + 1)));
  const n = lens.reduce((a, b) => a + b, 0);
  const logits = new Float32Array(n * W), labels = new Int32Array(n), segments = new Int32Array(n);
  const p = proto.logits.slice();
  for (let s = 1; s < o.scenes; s++) if (rnd() < subtle) p.copyWithin(s * W, (s - 1) * W, (s - 1) * W + C);
  let i = 0;
  for (let s = 0; s < o.scenes; s++) for (let f = 0; f < lens[s]; f++, i++) {
    for (let x = 0; x < W; x++) logits[i * W + x] = p[s * W + x] + noise * gauss();
    labels[i] = proto.labels[s];
    segments[i] = s;
  }
  return { cache: makeCache(n, E, C, logits, o.unlabelled ? undefined : labels), segments, scenes: o.scenes };
}

// Synthetic exit caches for tests and the benchmark: each sample has a hidden
// difficulty; deeper exits separate the true class further, so early exits are
// right on easy samples and wrong on hard ones, as trained heads tend to be.
import { mulberry32 } from '../../lib/graph/build.js';
import { makeCache, type ExitCache, type ExitCosts } from '../../lib/tune/cache.js';

export function syntheticCache(samples: number, exits: number, classes: number, seed = 1): ExitCache {
  const rnd = mulberry32(seed);
  const gauss = () => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const E1 = exits + 1;
  const logits = new Float32Array(samples * E1 * classes);
  const labels = new Int32Array(samples);
  for (let i = 0; i < samples; i++) {
    const y = Math.floor(rnd() * classes);
    labels[i] = y;
    const hard = rnd();
    for (let k = 0; k < E1; k++) {
      const skill = (k + 1) / E1;
      const base = (i * E1 + k) * classes;
      for (let c = 0; c < classes; c++) logits[base + c] = gauss();
      logits[base + y] += 6 * skill - 4 * hard + 1;
    }
  }
  return makeCache(samples, exits, classes, logits, labels);
}

/** Stage MACs growing with depth, small heads. */
export const syntheticCosts = (exits: number): ExitCosts => ({
  stage: Array.from({ length: exits + 1 }, (_, k) => 100_000 * (k + 1)),
  head: Array.from({ length: exits }, () => 2_000),
});

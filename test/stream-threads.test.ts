// The stream search spread over threads (tune/stream-threads.ts) against the same search on one thread:
// the tuning's JSON byte-identical at 1, 2 and 3 threads, labelled and not, with `then` policies (whose
// tables a worker rebuilds from copies) and segments. Workers run the compiled modules (npm test builds first).
import { describe, expect, it } from 'vitest';
import type { ExitCosts } from '../lib/tune/cache.js';
import { tuneStream } from '../lib/tune/stream.js';
import { tuneStreamThreaded } from '../lib/tune/stream-threads.js';
import { sceneStream } from './helpers/stream-cache.js';

describe('stream search on several threads', () => {
  it('tunes to the same bytes as on one thread', async () => {
    for (const [seed, unlabelled] of [[3, false], [4, true]] as const) {
      const s = sceneStream({ scenes: 160, minLen: 4, maxLen: 60, exits: 3, classes: 5, noise: 0.2, subtle: 0.3, seed, unlabelled });
      const costs: ExitCosts = { stage: [100_000, 150_000, 200_000, 300_000], head: [0, 0, 0] };
      const o = { maxDrop: 2, grid: 12, segments: s.segments, then: [{ kind: 'confidence' as const, thresholds: [0.9, 0.8, 0.7] }] };
      const one = JSON.stringify(tuneStream(s.cache, costs, o));
      for (const threads of [1, 2, 3]) {
        let used = 0;
        expect(JSON.stringify(await tuneStreamThreaded(s.cache, costs, { ...o, threads, onThreads: (n) => { used = n; } }))).toBe(one);
        expect(used).toBe(threads);
      }
      expect(JSON.parse(one).settings).toBeGreaterThan(600);
    }
  }, 120_000);
  it('refuses a thread count that is not a whole number ≥ 1', async () => {
    const s = sceneStream({ scenes: 10, minLen: 4, maxLen: 10, exits: 2, classes: 3, noise: 0.1, subtle: 0.1, seed: 1 });
    await expect(tuneStreamThreaded(s.cache, { stage: [1, 2, 3], head: [0, 0] }, { threads: 0 })).rejects.toThrow(/threads/);
  });
});

// The stream tuner's evaluator (tune/stream-walk.ts) against the state machine it stands in for:
// evalStream (policy/stream.ts's streamStep, frame by frame, the walk emit-c.test.ts holds bit for bit
// against the C a firmware runs) and sceneShares on its answers. Random stream caches and settings:
// both kinds, every distance, refresh periods (1 included) or none, `then` policies of every per-frame
// kind (budgets included), thresholds at and between observed distances, contiguous and scattered
// frames, segment ids and full-model runs, labelled and not, whole and fractional costs. One walk
// serves many settings in a row, as in the tuner, so the distances it keeps are reused across them.
import { describe, expect, it } from 'vitest';
import { mulberry32 } from '../lib/graph/build.js';
import { DISTANCES, distance, nextUp32, softmax, type FramePolicy, type StreamPolicy } from '../lib/policy/index.js';
import { reachOf, type ExitCosts } from '../lib/tune/cache.js';
import { fullAnswers, sceneIds } from '../lib/tune/scenes.js';
import { evalStream, sceneShares } from '../lib/tune/stream.js';
import { StreamWalk } from '../lib/tune/stream-walk.js';
import { sceneStream } from './helpers/stream-cache.js';

const pick = <T>(rnd: () => number, xs: readonly T[]): T => xs[Math.floor(rnd() * xs.length)];

function thenPolicy(rnd: () => number, E: number): FramePolicy | undefined {
  const th = () => Array.from({ length: E }, () => (rnd() < 0.3 ? null : rnd()));
  switch (Math.floor(rnd() * 6)) {
    case 0: return undefined;
    case 1: return { kind: 'confidence', thresholds: th() };
    case 2: return { kind: 'entropy', thresholds: th() };
    case 3: return { kind: 'margin', thresholds: th() };
    case 4: return { kind: 'patience', thresholds: [], patience: 1 + Math.floor(rnd() * 3) };
    default: return { kind: 'budget', thresholds: th(), budget: 150_000 + rnd() * 400_000, score: pick(rnd, ['confidence', 'entropy', 'margin'] as const) };
  }
}

describe('stream walk', () => {
  it('gives evalStream\'s figures and answers and sceneShares\' shares, bit for bit, on random caches and settings', () => {
    const rnd = mulberry32(2024);
    let settings = 0, reusedFrames = 0, refreshed = 0;
    for (let draw = 0; draw < 60; draw++) {
      const E = 1 + Math.floor(rnd() * 4), C = 2 + Math.floor(rnd() * 7);
      const s = sceneStream({ scenes: 6 + Math.floor(rnd() * 30), minLen: 1 + Math.floor(rnd() * 4), maxLen: 5 + Math.floor(rnd() * 60), exits: E, classes: C,
        noise: 0.02 + rnd() * 0.4, subtle: rnd() * 0.5, seed: 1 + draw, unlabelled: rnd() < 0.3 });
      const c = s.cache;
      const costs: ExitCosts = rnd() < 0.5
        ? { stage: Array.from({ length: E + 1 }, (_, k) => 100_000 * (k + 1)), head: Array.from({ length: E }, () => 2_000) }
        : { stage: Array.from({ length: E + 1 }, () => 1e5 * rnd() + 0.1), head: Array.from({ length: E }, () => 3 * rnd()) };
      const reach = reachOf(costs, E);
      const sc = sceneIds(c, rnd() < 0.5 ? s.segments : undefined), full = fullAnswers(c);
      const n = c.samples;
      // a contiguous part (as the tuner's) or a scattered subsequence
      let idx: Int32Array;
      if (rnd() < 0.7) { const a = Math.floor(rnd() * n * 0.4), b = a + Math.max(1, Math.floor((n - a) * (0.5 + rnd() * 0.5))); idx = Int32Array.from({ length: b - a }, (_, j) => a + j); }
      else idx = Int32Array.from(Array.from({ length: n }, (_, i) => i).filter(() => rnd() < 0.6));
      if (!idx.length) continue;
      const walk = new StreamWalk(c, idx, reach, sc.ids, full);
      // thresholds around the distances the frames show: some consecutive frame's, a step above, or anything
      const probs = (i: number, k: number) => softmax(c.logits, (i * (E + 1) + k) * C, C, new Float32Array(C));
      const thens = [undefined, thenPolicy(rnd, E), thenPolicy(rnd, E)];
      for (let t = 0; t < 40; t++) {
        const kind = rnd() < 0.6 ? 'difference' : 'agreeing', dist = pick(rnd, DISTANCES), exit = Math.floor(rnd() * (E + 1));
        const j = Math.floor(rnd() * (idx.length - 1)), k = kind === 'difference' ? exit : Math.floor(rnd() * (E + 1));
        const d = idx.length > 1 ? distance(dist, probs(idx[j + 1], k), probs(idx[j], k), C) : 0.1;
        const tau = pick(rnd, [d, nextUp32(d), d * (1 + rnd()), rnd() * 0.5, 0, 2]);
        const p: StreamPolicy = kind === 'difference' ? { kind, thresholds: [tau], distance: dist, exit } : { kind, thresholds: [tau], distance: dist };
        const then = pick(rnd, thens);
        if (then) p.then = then;
        const R = pick(rnd, [undefined, 1, 2, 3, 8, 17, 64]);
        if (R !== undefined) p.refresh = R;
        const outRef = new Int32Array(idx.length), outWalk = new Int32Array(idx.length).fill(-7);
        const ref = evalStream(c, idx, p, reach, outRef);
        const shares = sceneShares(c, idx, outRef, sc.ids, full);
        const got = walk.eval(p, outWalk);
        expect(JSON.stringify(got.run)).toBe(JSON.stringify(ref));
        expect(outWalk).toEqual(outRef);
        expect({ ...got.shares, lostEach: [...got.shares.lostEach], gainedEach: [...got.shares.gainedEach] })
          .toEqual({ ...shares, lostEach: [...shares.lostEach], gainedEach: [...shares.gainedEach] });
        // the same setting again, from the distances the walk kept
        expect(JSON.stringify(walk.eval(p).run)).toBe(JSON.stringify(ref));
        settings++; reusedFrames += ref.reused; if (R !== undefined && ref.scenes > 1) refreshed++;
      }
    }
    // the draws exercised what they are for: many settings, reuse, refreshes
    expect(settings).toBeGreaterThan(2000);
    expect(reusedFrames).toBeGreaterThan(10_000);
    expect(refreshed).toBeGreaterThan(500);
  });

  it('refuses a setting it cannot walk, naming the field', () => {
    const s = sceneStream({ scenes: 5, minLen: 3, maxLen: 6, seed: 3 });
    const c = s.cache, reach = reachOf({ stage: [1, 2, 3, 4], head: [0, 0, 0] }, 3), sc = sceneIds(c, s.segments);
    const walk = new StreamWalk(c, Int32Array.from({ length: c.samples }, (_, i) => i), reach, sc.ids, fullAnswers(c));
    expect(() => walk.eval({ kind: 'difference', thresholds: [0.1], distance: 'l1' })).toThrow(/policy\.exit/);
    expect(() => walk.eval({ kind: 'difference', thresholds: [0.1], distance: 'l3' as never, exit: 0 })).toThrow(/policy\.distance/);
  });
});

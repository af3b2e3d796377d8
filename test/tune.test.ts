// The tuner on caches whose answer is known: a hand-built cache with an analytic optimum, the held-out
// bound on random caches, the fast evaluation against the policy walk, certified stream policies on runs of scenes.
import { describe, expect, it } from 'vitest';
import { chainFor, runFrame, type FramePolicy } from '../lib/policy/index.js';
import { makeCache, reachOf, splitParts, viewOf, type ExitCache } from '../lib/tune/cache.js';
import { tune } from '../lib/tune/search.js';
import { evalStream, tuneStream } from '../lib/tune/stream.js';
import { syntheticCache, syntheticCosts } from './helpers/exit-cache.js';
import { sceneStream } from './helpers/stream-cache.js';
import { mulberry32 } from '../lib/graph/build.js';

/**
 * Two exits, two classes, samples in a period of 10 (so the even/odd split sees the same mix):
 * A (6 in 10): confidence 0.99 and right at both exits; B1 (2): 0.7 wrong at exit 0, 0.8 right at exit 1;
 * B2 (2): 0.7 wrong at exit 0, 0.6 wrong at exit 1. The final output is always right (0.99).
 * Stages 10, 10, 80 MACs, heads inside the stages. A confidence decision on 2 classes costs 4·2 + 1 = 9.
 * 4000 samples: 2000 certify, so a setting that loses no row has a bound of 1 − 0.025^(1/2000) ≈ 0.18 points.
 */
function handCache(N = 4000): ExitCache {
  const E = 2, C = 2;
  const logits = new Float32Array(N * 3 * C);
  const labels = new Int32Array(N);
  const put = (i: number, k: number, conf: number, right: boolean) => {
    const l = Math.log(conf / (1 - conf));
    const y = labels[i];
    logits[(i * 3 + k) * C + (right ? y : 1 - y)] = l;
  };
  for (let i = 0; i < N; i++) {
    labels[i] = (i >> 1) % 2;
    const t = i % 10;
    if (t < 6) { put(i, 0, 0.99, true); put(i, 1, 0.99, true); }
    else if (t < 8) { put(i, 0, 0.7, false); put(i, 1, 0.8, true); }
    else { put(i, 0, 0.7, false); put(i, 1, 0.6, false); }
    put(i, 2, 0.99, true);
  }
  return makeCache(N, E, C, logits, labels);
}
const handCosts = { stage: [10, 10, 80], head: [0, 0] };

describe('tune on a cache with a known optimum', () => {
  it('maxDrop 1, no robustness filter: A at exit 0, B1 at exit 1, B2 at the end: 0.6·19 + 0.2·38 + 0.2·118 = 42.6 MACs, certified', () => {
    const r = tune(handCache(), handCosts, { maxDrop: 1, robust: false });
    expect(r.full.held.accuracy).toBe(1);
    expect(r.full.held.meanMacs).toBe(100);
    expect(r.chosen.policy.kind).toBe('confidence');
    expect(r.chosen.held.accuracy).toBe(1);
    expect(r.chosen.held.meanMacs).toBeCloseTo(42.6, 10);
    expect(r.chosen.held.exitShare).toEqual([0.6, 0.2, 0.2]);
    const th = r.chosen.policy.thresholds as number[];
    expect(th[0]).toBeGreaterThan(0.7); expect(th[0]).toBeLessThanOrEqual(0.99 + 1e-6);
    expect(th[1]).toBeGreaterThan(0.6); expect(th[1]).toBeLessThanOrEqual(0.8 + 1e-6);
    const g = r.guarantee!;
    expect(g.certified).toBe(true);
    expect(g.estimate).toBe(0);
    // no row lost of 2000: Clopper–Pearson upper limit at δ/2 is 1 − (δ/2)^(1/n) (closed form for k = 0)
    expect(g.bound).toBeCloseTo((1 - 0.025 ** (1 / 2000)) * 100, 6);
    expect(g.margin).toBeCloseTo(1 - g.bound, 12);
    // every cheaper setting loses a fifth of the rows: the sequence stops right after the optimum
    expect(g.next!.estimate).toBeGreaterThanOrEqual(20);
    expect(g.needed).toBeUndefined();
  });

  it('with the robustness filter, the optimum sits on a cliff (one step cheaper loses B at exit 0): a dearer setting whose neighbour holds', () => {
    const r = tune(handCache(), handCosts, { maxDrop: 1 });
    expect(r.guarantee!.certified).toBe(true);
    expect(r.chosen.held.meanMacs).toBeGreaterThan(42.6);
    expect(r.chosen.held.meanMacs).toBeLessThan(100);
    expect(r.chosen.cert!.nudged).toBeLessThanOrEqual(1);
    expect(r.guarantee!.nudged).toBe(r.chosen.cert!.nudged);
  });

  it('maxDrop 23: a static budget at exit 1 (20 MACs, drop 20 points, bound ≈ 21.8) beats every thresholded setting (≥ 23)', () => {
    const r = tune(handCache(), handCosts, { maxDrop: 23 });
    expect(r.chosen.policy).toEqual({ kind: 'budget', thresholds: [], budget: 20 });
    expect(r.chosen.held.meanMacs).toBe(20);
    expect(r.chosen.held.accuracy).toBeCloseTo(0.8, 12);
    expect(r.guarantee!.estimate).toBeCloseTo(20, 9);
    // paired bound: Clopper–Pearson upper limit of 400 lost in 2000 at δ/2 = 0.025 (normal approximation ≈ 21.75; from memory)
    expect(r.guarantee!.bound).toBeGreaterThan(21.5);
    expect(r.guarantee!.bound).toBeLessThan(22.2);
  });

  it('too few rows: nothing cheaper than the full model is certified, the full model is kept, with the rows the next setting would need', () => {
    const r = tune(handCache(100), handCosts, { maxDrop: 1 });
    const g = r.guarantee!;
    expect(g.certified).toBe(false);
    expect(r.chosen.policy).toEqual({ kind: 'confidence', thresholds: [null, null] });
    expect(g.bound).toBe(0);
    expect(g.passed).toBe(0);
    expect(g.tested).toBe(1);
    // the first setting tested loses nothing; with no row lost the bound 1 − 0.025^(1/n) reaches 1 % at n ≥ ln 40 / −ln 0.99 ≈ 367
    expect(g.next!.estimate).toBe(0);
    expect(g.needed).toBeGreaterThanOrEqual(367);
    expect(g.needed).toBeLessThan(380);
  });

  it('--confidence outside (0, 1) is a usage error', () => {
    for (const confidence of [0, 1, 1.5, -0.1, NaN]) expect(() => tune(handCache(100), handCosts, { confidence })).toThrow(/confidence/);
  });
});

describe('tune on synthetic caches', () => {
  it('every setting the fixed sequence passed has its bound within maxDrop; the chosen one is among them or the full model', () => {
    for (const seed of [1, 2, 3]) for (const maxDrop of [0.5, 1, 3]) {
      const r = tune(syntheticCache(2000, 3, 5, seed), syntheticCosts(3), { maxDrop, grid: 16 });
      const pts = r.kinds.flatMap((k) => k.front);
      for (const p of pts) if (p.cert!.passed) expect(p.cert!.bound).toBeLessThanOrEqual(maxDrop);
      expect(pts.filter((p) => p.cert!.passed)).toHaveLength(r.guarantee!.passed);
      if (r.guarantee!.certified) expect(r.chosen.cert!.passed).toBe(true);
      else expect(r.chosen).toBe(r.full);
      expect(r.chosen.held.meanMacs).toBeLessThanOrEqual(r.full.held.meanMacs);
    }
  });

  it('the fast evaluation agrees with the policy walk on every front point', () => {
    const c = syntheticCache(1500, 4, 6, 9);
    const costs = syntheticCosts(4);
    const reach = reachOf(costs, 4);
    const r = tune(c, costs, { maxDrop: 1, grid: 12 });
    const held = splitParts(c.samples, 0.5, 'interleave').held; // the certification part
    let checked = 0;
    for (const k of r.kinds) for (const pt of k.front.filter((_, i) => i % 5 === 0)) {
      const p = pt.policy as FramePolicy;
      const ch = chainFor(p, reach, c.exits, c.classes);
      let correct = 0, cost = 0;
      const hist = new Array(c.exits + 1).fill(0);
      for (const i of held) {
        const w = runFrame(p, ch, viewOf(c, i));
        correct += w.label === c.labels[i] ? 1 : 0;
        cost += reach[w.exit] + w.overhead;
        hist[w.exit]++;
      }
      expect(correct / held.length).toBe(pt.held.accuracy);
      expect(cost / held.length).toBeCloseTo(pt.held.meanMacs, 6);
      expect(hist.map((h) => h / held.length)).toEqual(pt.held.exitShare);
      checked++;
    }
    expect(checked).toBeGreaterThan(10);
  });

  it('spends clearly less than the full model within 1 point, and is deterministic', () => {
    const c = syntheticCache(4000, 4, 10, 4);
    const a = tune(c, syntheticCosts(4), { maxDrop: 1 });
    const b = tune(c, syntheticCosts(4), { maxDrop: 1 });
    expect(JSON.stringify(a)).toBe(JSON.stringify(b));
    expect(a.chosen.held.meanMacs).toBeLessThan(0.8 * a.full.held.meanMacs);
  });

  it('without labels, accuracy is agreement with the full model (1 for the full model)', () => {
    const s = syntheticCache(600, 2, 4, 5);
    const c = makeCache(s.samples, s.exits, s.classes, s.logits);
    const r = tune(c, syntheticCosts(2), { maxDrop: 2, grid: 8 });
    expect(r.labelled).toBe(false);
    expect(r.full.held.accuracy).toBe(1);
  });

  it('unlabelled rows join the disagreement term: the method says so, and without labels they tighten the bound', () => {
    const lab = syntheticCache(2000, 3, 5, 21), extra = syntheticCache(8000, 3, 5, 22);
    const u = makeCache(extra.samples, extra.exits, extra.classes, extra.logits);
    const paired = tune(lab, syntheticCosts(3), { maxDrop: 1, grid: 16, unlabelled: u }).guarantee!;
    expect(paired.method).toMatch(/unlabelled/);
    // labelled and unlabelled rows: each split in half, one half searching, the other certifying
    expect([paired.evidence, paired.unlabelled]).toEqual([1000, 4000]);
    const bare = makeCache(lab.samples, lab.exits, lab.classes, lab.logits);
    const alone = tune(bare, syntheticCosts(3), { maxDrop: 1, grid: 16 });
    const more = tune(bare, syntheticCosts(3), { maxDrop: 1, grid: 16, unlabelled: u });
    expect(alone.guarantee!.method).toMatch(/^disagreement/);
    expect(more.guarantee!.method).toMatch(/unlabelled/);
    // the unlabelled rows split like the data: 4000 more search, 4000 more certify
    expect([more.guarantee!.evidence, more.guarantee!.unlabelled]).toEqual([1000, 4000]);
    expect(more.split.tune).toBe(1000 + 4000);
    // more evidence on both sides: a bound at least as tight for the chosen setting, and no dearer a choice
    expect(more.chosen.held.meanMacs).toBeLessThanOrEqual(alone.chosen.held.meanMacs);
    // with labels as well, disagreement bounds (more unlabelled rows than labelled): the run is the one without labels
    expect(JSON.stringify(tune(lab, syntheticCosts(3), { maxDrop: 1, grid: 16, unlabelled: u }).chosen.policy)).toBe(JSON.stringify(more.chosen.policy));
  });

  it('splits deterministically: interleaved for shuffled data, the tail for streams', () => {
    expect([...splitParts(6, 0.5, 'interleave').held]).toEqual([1, 3, 5]);
    expect([...splitParts(10, 0.3, 'interleave').held]).toEqual([3, 6, 9]);
    expect([...splitParts(10, 0.3, 'tail').held]).toEqual([7, 8, 9]);
  });
});

describe('stream tuning', () => {
  it('certified stream policies spend far less than per-frame ones at the same accuracy bound', () => {
    // 600 scenes of 6–20 frames, every change visible at the first exit
    const { cache: c, segments } = sceneStream({ scenes: 600, minLen: 6, maxLen: 20, subtle: 0, seed: 7 });
    const costs = syntheticCosts(3);
    const perFrame = tune(c, costs, { maxDrop: 3, grid: 16 });
    const then = perFrame.chosen.policy.kind === 'confidence' && perFrame.chosen.policy.thresholds.every((t) => t === null) ? [] : [perFrame.chosen.policy as FramePolicy];
    const o = { maxDrop: 3, confidence: 0.9, grid: 10, then, segments, distances: ['js', 'l1'] as const, refresh: [16, 64] };
    const s = tuneStream(c, costs, o);
    expect(s.guarantee.certified).toBe(true);
    expect(s.guarantee.bound).toBeLessThanOrEqual(3);
    expect((s.full.held.accuracy - s.chosen.held.accuracy) * 100).toBeLessThanOrEqual(3);
    expect(['difference', 'agreeing']).toContain(s.chosen.policy.kind);
    const tail = Int32Array.from({ length: s.split.held }, (_, j) => s.split.tune + j);
    const frameOnTail = evalStream(c, tail, perFrame.chosen.policy as FramePolicy, reachOf(costs, 3));
    expect(s.chosen.held.meanMacs).toBeLessThan(0.5 * frameOnTail.meanMacs);
    expect(JSON.stringify(tuneStream(c, costs, o))).toBe(JSON.stringify(s));
  });
});

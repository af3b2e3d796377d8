// Stream certification: evidence in scenes, the scene-level bound, and the
// promise on new recordings checked by simulation (the standard of issue 9:
// coverage over many random tuning/new-recording draws).
import { describe, expect, it } from 'vitest';
import { mulberry32 } from '../lib/graph/build.js';
import { SCENE_FORMS, sceneDropBound, scenesNeeded, type SceneShares } from '../lib/certify/scenes.js';
import { reachOf, makeCache } from '../lib/tune/cache.js';
import { sceneIds, sceneSplit, fullAnswers } from '../lib/tune/scenes.js';
import { evalStream, sceneShares, tuneStream } from '../lib/tune/stream.js';
import type { FramePolicy, StreamPolicy } from '../lib/policy/index.js';
import { sceneStream } from './helpers/stream-cache.js';
import { syntheticCosts } from './helpers/exit-cache.js';

const all = (n: number) => Int32Array.from({ length: n }, (_, i) => i);

describe('scenes as evidence', () => {
  it('segment ids and the full model\'s runs give scenes; the split keeps whole scenes and time order', () => {
    const s = sceneStream({ scenes: 40, minLen: 6, maxLen: 20, seed: 5 });
    const bySeg = sceneIds(s.cache, s.segments);
    expect(bySeg.count).toBe(40);
    expect(bySeg.source).toBe('segments');
    // the full model's runs: a change that holds 3 frames opens a scene; consecutive scenes of one class merge
    const byRuns = sceneIds(s.cache);
    expect(byRuns.count).toBeGreaterThan(20);
    expect(byRuns.count).toBeLessThanOrEqual(40 + 5);
    const f = fullAnswers(s.cache);
    for (let i = 1; i < s.cache.samples; i++) if (byRuns.ids[i] !== byRuns.ids[i - 1]) expect(f[i]).not.toBe(f[i - 1]);
    const p = sceneSplit(bySeg.ids, 0.5);
    expect(p.tune.length + p.held.length).toBe(s.cache.samples);
    expect(p.held[0]).toBe(p.tune.at(-1)! + 1);
    expect(bySeg.ids[p.held[0]]).not.toBe(bySeg.ids[p.tune.at(-1)!]);
    expect(Math.abs(p.held.length - s.cache.samples / 2)).toBeLessThanOrEqual(20);
  });

  it('a single flicker of the full model stays inside its scene', () => {
    // 3 classes, no exits of interest: the final output says 0 0 0 1 0 0 2 2 2 2
    const answers = [0, 0, 0, 1, 0, 0, 2, 2, 2, 2];
    const logits = new Float32Array(answers.length * 2 * 3);
    answers.forEach((a, i) => { logits[(i * 2 + 1) * 3 + a] = 5; });
    const ids = sceneIds(makeCache(answers.length, 1, 3, logits)).ids;
    expect([...ids]).toEqual([0, 0, 0, 0, 0, 0, 1, 1, 1, 1]);
  });

  /** Shares of n scenes drawn one by one, as the tuner hands them over. */
  const sharesOf = (lostEach: number[], gainedEach: number[], labelled: boolean): SceneShares => ({
    n: lostEach.length, lost: lostEach.reduce((a, b) => a + b, 0) / lostEach.length, gained: gainedEach.reduce((a, b) => a + b, 0) / lostEach.length,
    labelled, lostEach: Float64Array.from(lostEach), gainedEach: Float64Array.from(gainedEach),
  });

  it('every form of the scene bound covers the true scene-averaged drop in at least C of draws (labelled and not)', () => {
    // per-scene shares drawn from a known mixture: most scenes lose nothing, some lose a run of frames, some gain
    // (Hoeffding–Bentkus holds for any loss in [0, 1]: Bates et al. 2021, Theorem 1 and Prop. 5; the betting bound:
    // Waudby-Smith & Ramdas 2023; empirical Bernstein: Maurer & Pontil 2009, Theorem 4)
    const rnd = mulberry32(17);
    const n = 120, delta = 0.1, draws = 600;
    const lostOf = () => (rnd() < 0.15 ? 0.1 + 0.4 * rnd() : 0), gainOf = () => (rnd() < 0.1 ? 0.2 * rnd() : 0);
    const trueLost = 0.15 * 0.3, trueGain = 0.1 * 0.1;
    const broken = new Map<string, number>();
    for (let d = 0; d < draws; d++) {
      const l = Array.from({ length: n }, lostOf), g = Array.from({ length: n }, gainOf);
      for (const f of SCENE_FORMS.labelled) if (sceneDropBound(sharesOf(l, g, true), delta, f).bound < trueLost - trueGain) broken.set(`labelled ${f}`, (broken.get(`labelled ${f}`) ?? 0) + 1);
      for (const f of SCENE_FORMS.unlabelled) if (sceneDropBound(sharesOf(l, l.map(() => 0), false), delta, f).bound < trueLost) broken.set(`unlabelled ${f}`, (broken.get(`unlabelled ${f}`) ?? 0) + 1);
    }
    console.log(`scene bound coverage (allowed ≈ ${delta * draws} of ${draws}): ${[...SCENE_FORMS.labelled.map((f) => `labelled ${f}`), ...SCENE_FORMS.unlabelled.map((f) => `unlabelled ${f}`)].map((k) => `${k} ${broken.get(k) ?? 0}`).join(', ')}`);
    // binomial slack: 3 standard deviations of a share δ over `draws` draws (common practice)
    const slack = 3 * Math.sqrt((delta * (1 - delta)) / draws);
    for (const v of broken.values()) expect(v / draws).toBeLessThanOrEqual(delta + slack);
    expect(() => sceneDropBound(sharesOf([0.1], [0], false), delta, 'net:betting')).toThrow(/labels/);
  });

  it('with no loss observed, Hoeffding–Bentkus on lost shares is the closed form 1 − δ^(1/n) (Hoeffding\'s term, Bates et al. 2021)', () => {
    // h1(0, b) = −ln(1 − b), so exp(−n·h1) = (1 − b)^n ≤ δ at b = 1 − δ^(1/n); Bentkus' e·(1 − b)^n is larger there
    for (const n of [10, 100, 736]) {
      const zero = Array.from({ length: n }, () => 0);
      expect(sceneDropBound(sharesOf(zero, zero, false), 0.05, 'lost:hb').bound).toBeCloseTo(1 - 0.05 ** (1 / n), 9);
      expect(sceneDropBound(sharesOf(zero, zero, true), 0.05, 'lost:hb').bound).toBeCloseTo(1 - 0.05 ** (1 / n), 9);
      // the betting bound on net shares pays for their range [−1, 1], twice the lost share's: here Hoeffding–Bentkus is
      // tighter, and the search part's choice of form takes it
      const bet = sceneDropBound(sharesOf(zero, zero, true), 0.05).bound;
      expect(bet).toBeGreaterThan(1 - 0.05 ** (1 / n));
      if (n > 10) expect(bet).toBeLessThan(sceneDropBound(sharesOf(zero.slice(0, n / 10), zero.slice(0, n / 10), true), 0.05).bound);
    }
  });

  it('scenes needed: the bound on the scenes seen, repeated in order, reaches the promise there and not well before', () => {
    const l = Array.from({ length: 50 }, (_, i) => (i % 10 === 0 ? 0.04 : 0)), g = Array.from({ length: 50 }, (_, i) => (i % 25 === 1 ? 0.02 : 0));
    const s = sharesOf(l, g, true);
    const rep = (k: number) => sharesOf(Array.from({ length: k }, (_, i) => l[i % 50]), Array.from({ length: k }, (_, i) => g[i % 50]), true);
    for (const f of SCENE_FORMS.labelled) {
      const need = scenesNeeded(s, 0.02, 0.05, f)!;
      expect(need).toBeGreaterThan(50);
      expect(sceneDropBound(rep(need), 0.05, f).bound).toBeLessThanOrEqual(0.02);
      expect(sceneDropBound(rep(Math.floor(need * 0.99) - 1), 0.05, f).bound).toBeGreaterThan(0.02);
    }
    expect(scenesNeeded(sharesOf(l.map((x) => x * 10), g, true), 0.02, 0.05)).toBeUndefined();
  });
});

describe('certified stream tuning', () => {
  const costs = syntheticCosts(2), reach = reachOf(costs, 2);
  const small = { kinds: ['difference'] as const, distances: ['js'] as const, grid: 6, refresh: [8, 32] };

  it('keeps its promise on new recordings: over 200 draws at each of two promises, broken in at most 1 − C (plus slack)', () => {
    // each draw: a tuning recording of 160 scenes, then a new recording of 400 scenes from the same source;
    // broken = the chosen setting's drop on the new recording exceeds --max-drop (frame-weighted, and scene-averaged)
    // at 6 points, and at 3, where the bound binds (fewer draws certify)
    for (const maxDrop of [6, 3]) {
    const C = 0.9, draws = 200;
    let brokenF = 0, brokenS = 0, certified = 0, saving = 0, worst = -Infinity;
    const fullPolicy: FramePolicy = { kind: 'confidence', thresholds: [null, null] };
    for (let d = 0; d < draws; d++) {
      const unlabelled = d % 2 === 1;
      const src = { minLen: 4, maxLen: 16, subtle: 0.3, unlabelled, exits: 2 };
      const t = sceneStream({ scenes: 160, seed: 1000 + d, ...src });
      const r = tuneStream(t.cache, costs, { maxDrop, confidence: C, segments: t.segments, ...small });
      if (r.guarantee.certified) certified++;
      const nw = sceneStream({ scenes: 400, seed: 500_000 + d, ...src });
      const idx = all(nw.cache.samples), lab = new Int32Array(idx.length);
      const e = evalStream(nw.cache, idx, r.chosen.policy as StreamPolicy | FramePolicy, reach, lab);
      const f = evalStream(nw.cache, idx, fullPolicy, reach);
      const sh = sceneShares(nw.cache, idx, lab, nw.segments, fullAnswers(nw.cache));
      const frameDrop = (f.accuracy - e.accuracy) * 100, sceneDrop = (sh.lost - sh.gained) * 100;
      if (frameDrop > maxDrop) brokenF++;
      if (sceneDrop > maxDrop) brokenS++;
      worst = Math.max(worst, frameDrop, sceneDrop);
      saving += 1 - e.meanMacs / f.meanMacs;
    }
    console.log(`stream coverage (synthetic scenes, C ${C}, max drop ${maxDrop}): broken ${brokenF}/${draws} frame-weighted, ${brokenS}/${draws} scene-averaged; ` +
      `certified ${certified}/${draws}; worst drop ${worst.toFixed(2)} points; mean saving ${((saving / draws) * 100).toFixed(1)} %`);
    const slack = 3 * Math.sqrt((C * (1 - C)) / draws);
    expect(brokenF / draws).toBeLessThanOrEqual(1 - C + slack);
    expect(brokenS / draws).toBeLessThanOrEqual(1 - C + slack);
    // not vacuous: most draws certify a stream setting that saves
    if (maxDrop === 6) { expect(certified).toBeGreaterThan(draws * 0.8); expect(saving / draws).toBeGreaterThan(0.3); }
    }
  }, 300_000);

  it('when data is short it keeps the full model and says how many scenes it would need', () => {
    const t = sceneStream({ scenes: 16, minLen: 10, maxLen: 30, seed: 4, exits: 2 });
    const r = tuneStream(t.cache, costs, { maxDrop: 1, confidence: 0.95, segments: t.segments, ...small });
    const g = r.guarantee;
    expect(g.certified).toBe(false);
    expect(r.chosen.policy.kind).toBe('confidence');
    expect(g.unit).toBe('scenes');
    expect(g.evidence).toBe(r.scenes.held);
    expect(g.evidence).toBeLessThanOrEqual(9);
    expect(g.passed).toBe(0);
    expect(g.needed).toBeGreaterThan(100);
    expect(g.assumes.join(' ')).toMatch(/independent/);
    expect(g.assumes.join(' ')).toMatch(/rate like the tuning recording/);
  });

  it('the chosen setting carries its refresh; same inputs give the same result', () => {
    const t = sceneStream({ scenes: 300, minLen: 4, maxLen: 16, seed: 8, exits: 2 });
    const o = { maxDrop: 6, confidence: 0.9, segments: t.segments, ...small };
    const r = tuneStream(t.cache, costs, o);
    expect(r.guarantee.certified).toBe(true);
    const p = r.chosen.policy as StreamPolicy;
    expect([8, 32]).toContain(p.refresh);
    expect(r.guarantee.bound).toBeLessThanOrEqual(6);
    expect(r.guarantee.margin).toBeCloseTo(6 - r.guarantee.bound, 12);
    expect(r.guarantee.bound).toBeGreaterThanOrEqual(r.guarantee.estimate);
    expect(JSON.stringify(tuneStream(t.cache, costs, o))).toBe(JSON.stringify(r));
    expect(() => tuneStream(t.cache, costs, { ...o, confidence: 1 })).toThrow(/confidence/);
  });
});

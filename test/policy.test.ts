// Exit-policy math against worked examples and closed forms. The policy computes in float32 (as the
// firmware does), so closed forms computed in float64 agree to float32's ~7 significant digits (6 asked).
import { describe, expect, it } from 'vitest';
import {
  argmax, budgetCap, checkPolicy, chain, confidence, cosine, decisionCost, entropy, entropyOfProbs, js, l1, l2, margin, runFrame,
  softmax, streamStart, streamStep, worstCase, type ExitView, type StreamPolicy,
} from '../lib/policy/index.js';
import { exp32, fromBits32, log32, nextUp32, sqrt32, toBits32 } from '../lib/policy/f32.js';
import { OfframpError } from '../lib/errors.js';

const sm = (z: number[]) => [...softmax(z, 0, z.length, new Float32Array(z.length))];
/** Logits whose softmax is p (ln p, any shift). */
const logitsOf = (p: number[]) => p.map((x) => Math.log(x));
/** One view over a list of per-exit logit vectors. */
const view = (rows: number[][]): ExitView => ({ data: (k) => rows[k], offset: () => 0 });

describe('softmax and scores', () => {
  it('softmax matches the worked example and the closed form', () => {
    // Wikipedia, "Softmax function", example (from memory): softmax(1,2,3,4,1,2,3) ≈ (0.024, 0.064, 0.175, 0.475, 0.024, 0.064, 0.175)
    const p = sm([1, 2, 3, 4, 1, 2, 3]);
    [0.024, 0.064, 0.175, 0.475, 0.024, 0.064, 0.175].forEach((v, i) => expect(p[i]).toBeCloseTo(v, 3));
    // closed form eᶻⁱ / Σ eᶻ
    const z = [0.5, -1, 2];
    const s = z.reduce((a, x) => a + Math.exp(x), 0);
    sm(z).forEach((v, i) => expect(v).toBeCloseTo(Math.exp(z[i]) / s, 6));
    // max-subtracted: a shift of 1000 neither overflows nor changes the result
    sm(z.map((x) => x + 1000)).forEach((v, i) => expect(v).toBeCloseTo(Math.exp(z[i]) / s, 6));
    expect(sm([1000, 0])[0]).toBe(1);
  });

  it('confidence and margin are the top-1 and top-1 − top-2 of the softmax', () => {
    const z = [0.3, 2.1, -0.4, 1.7];
    const p = sm(z).sort((a, b) => b - a);
    expect(confidence(z, 0, 4)).toBeCloseTo(p[0], 6);
    expect(margin(z, 0, 4)).toBeCloseTo(p[0] - p[1], 6);
    expect(margin([2, 2, 0], 0, 3)).toBe(0);
    expect(argmax([1, 3, 3, 0], 0, 4)).toBe(1); // ties: lowest index, as numpy.argmax
    expect(confidence([9, 1, 2, 3], 1, 3)).toBeCloseTo(sm([1, 2, 3])[2], 6); // offsets
  });

  it('normalised entropy: uniform 1, binary entropy h(0.1), closed form', () => {
    expect(entropy([0, 0, 0, 0], 0, 4)).toBe(1);
    // binary entropy h(0.1) = 0.4690 bits (Cover & Thomas, Elements of Information Theory, from memory); normalised by log2 2 = 1
    expect(entropy(logitsOf([0.9, 0.1]), 0, 2)).toBeCloseTo(0.469, 4);
    // closed form −Σ p ln p / ln n
    const z = [1.5, -0.2, 0.7, 3, 0];
    expect(entropy(z, 0, 5)).toBeCloseTo(entropyOfProbs(sm(z)) / Math.log(5), 6);
    expect(entropy([50, 0, 0], 0, 3)).toBeLessThan(1e-18);
    expect(entropy([1], 0, 1)).toBe(0);
  });
});

describe('float32 arithmetic of the decisions (lib/policy/f32.ts)', () => {
  /** Error of a float32 result in units in the last place of the float32 nearest the exact value. */
  const ulps = (got: number, exact: number): number => {
    const e = Math.abs(Math.fround(exact));
    const ulp = e < 2 ** -126 ? 2 ** -149 : fromBits32(toBits32(e) + 1) - e;
    return Math.abs(got - exact) / ulp;
  };
  // Math.exp and Math.log are float64 (V8: within 1 ulp of float64, 2^-29 of a float32 ulp): exact at float32 scale.
  it('exp32 and log32 are within 1 ulp of float32 of Math.exp and Math.log, and mostly correctly rounded', () => {
    let maxExp = 0, maxLog = 0, atExp = 0, atLog = 0, roundedExp = 0, roundedLog = 0, nExp = 0, nLog = 0;
    // every 499th float32 bit pattern: all exponents, subnormals included
    for (let u = 0; u < 2 ** 32; u += 499) {
      const x = fromBits32(u);
      if (!Number.isFinite(x)) continue;
      if (x > -104 && x < 88.72) {
        const g = exp32(x), e = ulps(g, Math.exp(x));
        nExp++; roundedExp += +(g === Math.fround(Math.exp(x)));
        if (e > maxExp) { maxExp = e; atExp = x; }
      }
      if (x > 0) {
        const g = log32(x), e = ulps(g, Math.log(x));
        nLog++; roundedLog += +(g === Math.fround(Math.log(x)));
        if (e > maxLog) { maxLog = e; atLog = x; }
      }
    }
    console.log(`exp32: max ${maxExp.toFixed(3)} ulp (at ${atExp}), ${(100 * roundedExp / nExp).toFixed(2)} % correctly rounded of ${nExp}; ` +
      `log32: max ${maxLog.toFixed(3)} ulp (at ${atLog}), ${(100 * roundedLog / nLog).toFixed(2)} % of ${nLog}`);
    expect(maxExp).toBeLessThan(1);
    expect(maxLog).toBeLessThan(1);
    expect(roundedExp / nExp).toBeGreaterThan(0.98);
    expect(roundedLog / nLog).toBeGreaterThan(0.98);
  });

  it('special values as IEEE 754 and C99 Annex F give them', () => {
    expect(exp32(0)).toBe(1);
    expect(exp32(-0)).toBe(1);
    expect(exp32(-Infinity)).toBe(0);
    expect(exp32(Infinity)).toBe(Infinity);
    expect(exp32(89)).toBe(Infinity);     // e^89 > FLT_MAX ≈ 3.4028e38 = e^88.72
    expect(exp32(-104)).toBe(0);          // e^-104 < half the least subnormal 2^-149 ≈ e^-103.28
    expect(exp32(-100)).toBe(Math.fround(Math.exp(-100)));   // a subnormal, rounded once
    expect(Number.isNaN(exp32(NaN))).toBe(true);
    expect(log32(1)).toBe(0);
    expect(log32(0)).toBe(-Infinity);
    expect(log32(Infinity)).toBe(Infinity);
    expect(Number.isNaN(log32(-1))).toBe(true);
    expect(log32(2 ** -149)).toBe(Math.fround(-149 * Math.LN2));
    expect(log32(2)).toBe(Math.fround(Math.LN2));
    expect(sqrt32(2)).toBe(Math.fround(Math.SQRT2));
    expect(nextUp32(0)).toBe(2 ** -149);
    expect(nextUp32(1)).toBe(1 + 2 ** -23);
    expect(nextUp32(-1)).toBe(-1 + 2 ** -24);
  });
});

describe('distances on softmax vectors', () => {
  it('Jensen–Shannon in bits: 1 for disjoint supports, H(M) − (H(P)+H(Q))/2 otherwise', () => {
    // the divergence is bounded by 1 bit, reached by distributions with disjoint supports (Lin 1991, IEEE Trans. Inf. Theory 37(1))
    expect(js([1, 0], [0, 1], 2)).toBeCloseTo(1, 6);
    // P = (½, ½), Q = (1, 0): M = (¾, ¼); JS = h(¼) − (1 + 0)/2 = 0.811278 − 0.5 = 0.311278 bits (worked by hand)
    expect(js([0.5, 0.5], [1, 0], 2)).toBeCloseTo(0.311278, 6);
    const P = [0.2, 0.5, 0.3], Q = [0.6, 0.1, 0.3];
    const M = P.map((p, i) => (p + Q[i]) / 2);
    const bits = (p: number[]) => entropyOfProbs(p) / Math.LN2;
    expect(js(P, Q, 3)).toBeCloseTo(bits(M) - (bits(P) + bits(Q)) / 2, 6);
    expect(js(P, Q, 3)).toBeCloseTo(js(Q, P, 3), 6);
    expect(js(P, P, 3)).toBe(0);
  });

  it('L1, L2, cosine on orthogonal and equal vectors', () => {
    expect(l1([1, 0], [0, 1], 2)).toBe(2);
    expect(l2([1, 0], [0, 1], 2)).toBe(Math.fround(Math.SQRT2));   // the float32 nearest √2
    expect(cosine([1, 0], [0, 1], 2)).toBe(1);
    expect(cosine([0.3, 0.7], [0.3, 0.7], 2)).toBeCloseTo(0, 6);
    expect(l1([0.2, 0.8], [0.5, 0.5], 2)).toBeCloseTo(0.6, 6);
  });
});

describe('per-frame walks', () => {
  const E = 4, C = 3;
  const oneHot = (l: number, s = 5) => [0, 1, 2].map((c) => (c === l ? s : 0));
  const walk = (labels: number[]) => view([...labels.map((l) => oneHot(l)), oneHot(0)]);

  it('patience stops once the class has stayed the same over p consecutive exits', () => {
    const p = (patience: number) => ({ kind: 'patience', thresholds: [], patience }) as const;
    expect(runFrame(p(2), chain(E, C), walk([2, 2, 1, 1])).exit).toBe(1);
    expect(runFrame(p(3), chain(E, C), walk([2, 1, 1, 1])).exit).toBe(3);
    expect(runFrame(p(2), chain(E, C), walk([1, 2, 1, 2])).exit).toBe(4); // never settled: the final output
    expect(runFrame(p(1), chain(E, C), walk([1, 2, 1, 2])).exit).toBe(0);
    const r = runFrame(p(3), chain(E, C), walk([0, 1, 1, 1]));
    expect([r.exit, r.label]).toEqual([3, 1]);
    expect(r.overhead).toBe(4 * (C - 1 + 3)); // four decisions of argmax + 3 ops
  });

  it('score thresholds: null makes no decision and costs nothing', () => {
    const rows = [logitsOf([0.5, 0.3, 0.2]), logitsOf([0.8, 0.1, 0.1]), logitsOf([0.95, 0.03, 0.02]), oneHot(1), oneHot(2)];
    const pol = { kind: 'confidence', thresholds: [0.6, null, 0.9, 0.9] } as const;
    const r = runFrame(pol, chain(E, C), view(rows));
    expect(r.exit).toBe(2);
    expect(r.overhead).toBe(2 * (4 * C + 1));
    expect(runFrame({ kind: 'entropy', thresholds: [null, 0.6, null, null] }, chain(E, C), view(rows)).exit).toBe(1);
    expect(runFrame({ kind: 'margin', thresholds: [0.3, 0.3, 0.3, 0.3] }, chain(E, C), view(rows)).exit).toBe(1);
  });

  it('budget: the deepest exit whose worst-case cost fits, combined with a score', () => {
    const reach = [10, 20, 30, 40, 100];
    expect(budgetCap(25, reach)).toBe(1);
    expect(budgetCap(5, reach)).toBe(0);
    expect(budgetCap(1000, reach)).toBe(4);
    const p = { kind: 'budget', thresholds: [0.99, 0.99, null, null], budget: 40, score: 'confidence' } as const;
    const w = worstCase(p, reach, E, C);
    expect([...w]).toEqual([10, 20 + 13, 30 + 26, 40 + 26, 100 + 26]); // decisions at exits 0 and 1 cost 4·3+1 each
    expect(budgetCap(p.budget, w)).toBe(1);
    const rows = [oneHot(0, 0.1), oneHot(1, 0.1), oneHot(2), oneHot(2), oneHot(2)];
    expect(runFrame(p, chain(E, C, 1), view(rows)).exit).toBe(1);
    expect(decisionCost(p, 2, C)).toBe(0);
  });

  it('checkPolicy names what is wrong', () => {
    expect(() => checkPolicy({ kind: 'confidence', thresholds: [0.5] }, 2)).toThrow(/needs 2 thresholds/);
    expect(() => checkPolicy({ kind: 'nope', thresholds: [] }, 2)).toThrow(OfframpError);
    expect(() => checkPolicy({ kind: 'difference', thresholds: [0.1], distance: 'l3', exit: 0 }, 2)).toThrow(/distance/);
    expect(() => checkPolicy({ kind: 'difference', thresholds: [0.1], distance: 'l1', exit: 0, refresh: 0 }, 2)).toThrow(/refresh/);
    expect(() => checkPolicy({ kind: 'agreeing', thresholds: [0.1], distance: 'l1', refresh: 2.5 }, 2)).toThrow(/refresh/);
    expect(checkPolicy({ kind: 'agreeing', thresholds: [0.1], distance: 'l1', refresh: 16 }, 2)).toBeTruthy();
    expect(() => checkPolicy({ kind: 'agreeing', thresholds: [0.1], distance: 'js', then: { kind: 'agreeing', thresholds: [1], distance: 'js' } }, 2)).toThrow(/per-frame/);
    expect(checkPolicy({ kind: 'patience', thresholds: [], patience: 2 }, 3).kind).toBe('patience');
  });
});

describe('stream state machines', () => {
  const E = 2, C = 3;
  // frames as [exit 0, exit 1, final] logits
  const frame = (l0: number, l1: number, lf: number, s = 4) => view([l0, l1, lf].map((l) => [0, 1, 2].map((c) => (c === l ? s : 0))));

  it('difference reuses the scene result while the first exit stays close, reopens on a jump', () => {
    const p: StreamPolicy = { kind: 'difference', thresholds: [0.1], distance: 'l1', exit: 0 };
    const s = streamStart(C);
    const steps = [frame(0, 0, 0), frame(0, 1, 1), frame(2, 2, 2), frame(2, 2, 1)].map((f) => streamStep(p, s, f, chain(E, C)));
    expect(steps.map((r) => [r.exit, r.label, r.reused, r.scene])).toEqual([
      [2, 0, false, 0], // first frame: full run, scene 0
      [0, 0, true, 0], // same exit-0 output: the scene's result, though the final would say 1
      [2, 2, false, 1],
      [0, 2, true, 1],
    ]);
    expect(steps[1].distance).toBe(0);
  });

  it('agreeing compares at the shallowest exit that agreed, and a label change opens a scene', () => {
    const p: StreamPolicy = { kind: 'agreeing', thresholds: [2.5], distance: 'l1' }; // threshold above any L1 distance
    const s = streamStart(C);
    const a = streamStep(p, s, frame(1, 0, 0), chain(E, C));
    expect([a.exit, a.label, s.exit]).toEqual([2, 0, 1]); // exit 0 said 1, exit 1 agreed with the final 0
    const b = streamStep(p, s, frame(2, 0, 0), chain(E, C));
    expect([b.exit, b.reused]).toEqual([1, true]);
    const c = streamStep(p, s, frame(2, 2, 2), chain(E, C));
    expect([c.exit, c.reused, c.scene, s.exit]).toEqual([2, false, 1, 0]); // label at exit 1 changed: new scene, exit 0 agrees now
    const d = streamStep(p, s, frame(2, 1, 2), chain(E, C));
    expect([d.exit, d.label, d.reused]).toEqual([0, 2, true]);
  });

  it('a refresh of R runs one frame in any R on to the final output, untested, and opens a scene with it', () => {
    // worked example: R = 3 on a scene that never changes; after a full run the age is 0, each reuse adds one,
    // and a frame arriving at age R − 1 = 2 is forced: E, 0, 0, E, 0, 0, E …
    const p: StreamPolicy = { kind: 'difference', thresholds: [0.1], distance: 'l1', exit: 0, refresh: 3 };
    const s = streamStart(C);
    const steps = Array.from({ length: 7 }, () => streamStep(p, s, frame(0, 1, 1), chain(E, C)));
    expect(steps.map((r) => [r.exit, r.label, r.reused, r.scene])).toEqual([
      [2, 1, false, 0], [0, 1, true, 0], [0, 1, true, 0], [2, 1, false, 1], [0, 1, true, 1], [0, 1, true, 1], [2, 1, false, 2],
    ]);
    // the forced frame is not compared: its distance stays unmeasured
    expect(Number.isNaN(steps[3].distance)).toBe(true);
    // a missed change (exit 0 unchanged, the final output now 2) lasts until the next refresh at most
    const q: StreamPolicy = { ...p, refresh: 4 };
    const t = streamStart(C);
    const labels = [frame(0, 1, 1), frame(0, 1, 1), frame(0, 2, 2), frame(0, 2, 2), frame(0, 2, 2), frame(0, 2, 2)].map((f) => streamStep(q, t, f, chain(E, C)).label);
    expect(labels).toEqual([1, 1, 1, 1, 2, 2]);
    // a `then` that stops at exit 0 (no final output): with R = 2 every other frame is forced on to it
    const u = streamStart(C);
    const w: StreamPolicy = { ...p, refresh: 2, then: { kind: 'confidence', thresholds: [0.5, 0.5] } };
    expect([0, 1, 2, 3, 4].map(() => streamStep(w, u, frame(0, 1, 1, 8), chain(E, C)).exit)).toEqual([0, 2, 0, 2, 0]);
  });

  it('runs on with a per-frame policy on a scene change', () => {
    const p: StreamPolicy = { kind: 'difference', thresholds: [0.1], distance: 'js', exit: 0, then: { kind: 'confidence', thresholds: [0.9, 0.9] } };
    const s = streamStart(C);
    const r = streamStep(p, s, frame(1, 1, 0, 8), chain(E, C));
    expect([r.exit, r.label]).toEqual([0, 1]); // confident at the compared exit: stops there
  });
});

import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { binomialCdf, chainedSequences, clopperPearsonLower, clopperPearsonUpper, dropBound, fixedSequence, hoeffdingBentkusUpper, incompleteBeta, rowsNeeded } from '../lib/certify/index.js';
import { mulberry32 } from '../lib/graph/build.js';
import { bettingUpper, empiricalBernsteinUpper } from '../lib/certify/mean.js';

// Reference values from SciPy (Debian python3-scipy), made by scripts/make-certify-reference.py.
const ref = JSON.parse(readFileSync(new URL('./fixtures/certify/reference.json', import.meta.url), 'utf8'));

const binomial = (n: number, p: number, rnd: () => number) => { let k = 0; for (let i = 0; i < n; i++) if (rnd() < p) k++; return k; };

describe('Clopper–Pearson limits and binomial tails', () => {
  it('equal the beta quantiles of SciPy', () => {
    for (const c of ref.clopperPearson) {
      expect(clopperPearsonUpper(c.k, c.n, c.delta)).toBeCloseTo(c.upper, 10);
      expect(clopperPearsonLower(c.k, c.n, c.delta)).toBeCloseTo(c.lower, 10);
    }
    expect(ref.clopperPearson.length).toBeGreaterThan(250);
  });
  it('binomial CDF and the incomplete beta equal SciPy', () => {
    for (const c of ref.binomialCdf) expect(Math.abs(binomialCdf(c.k, c.n, c.p) - c.cdf)).toBeLessThan(1e-12 + 1e-9 * c.cdf);
    for (const c of ref.incompleteBeta) expect(incompleteBeta(c.x, c.a, c.b)).toBeCloseTo(c.value, 10);
  });
  it('with no events the upper limit is 1 − δ^(1/n) (closed form; ≈ 3/n at δ = 0.05, the "rule of three", common practice)', () => {
    for (const n of [10, 100, 1000, 30000]) {
      expect(clopperPearsonUpper(0, n, 0.05)).toBeCloseTo(1 - 0.05 ** (1 / n), 12);
    }
    expect(clopperPearsonUpper(0, 1000, 0.05) * 1000).toBeCloseTo(3, 0);
  });
  it('refuses counts that are not counts', () => {
    expect(() => clopperPearsonUpper(3, 2, 0.05)).toThrow(RangeError);
    expect(() => clopperPearsonUpper(1, 2, 1)).toThrow(RangeError);
  });
});

describe('drop bounds hold by simulation', () => {
  // True rates: full right & policy wrong p10, the reverse p01; true drop p10 − p01.
  const trial = (p10: number, p01: number, n: number, delta: number, draws: number, seed: number, unlabelled = 0) => {
    const rnd = mulberry32(seed);
    let broken = 0;
    for (let d = 0; d < draws; d++) {
      let lost = 0, gained = 0;
      for (let i = 0; i < n; i++) { const u = rnd(); if (u < p10) lost++; else if (u < p10 + p01) gained++; }
      // disagreement includes both kinds of discordance plus rows where both are wrong differently (0.01 here)
      const disagree = lost + gained + binomial(n, 0.01, rnd) + binomial(unlabelled, p10 + p01 + 0.01, rnd);
      const b = dropBound({ paired: { n, lost, gained }, agreement: unlabelled ? { n: n + unlabelled, disagree } : undefined }, delta);
      if (b.bound < p10 - p01) broken++;
    }
    return broken / draws;
  };
  it('paired: the share of draws whose bound falls under the true drop stays at most δ', () => {
    for (const [p10, p01, n] of [[0.02, 0.01, 400], [0.005, 0, 1000], [0.05, 0.04, 300]] as const) {
      const rate = trial(p10, p01, n, 0.1, 600, 7 + n);
      // binomial slack: 3 standard deviations of a share over 600 draws at δ = 0.1
      expect(rate, `p10=${p10} p01=${p01} n=${n}`).toBeLessThanOrEqual(0.1 + 3 * Math.sqrt(0.1 * 0.9 / 600));
    }
  });
  it('paired with unlabelled rows: still at most δ, and tighter when discordance is rare', () => {
    expect(trial(0.01, 0.002, 300, 0.1, 600, 99, 3000)).toBeLessThanOrEqual(0.1 + 3 * Math.sqrt(0.1 * 0.9 / 600));
    const alone = dropBound({ paired: { n: 300, lost: 3, gained: 0 } }, 0.05).bound;
    const more = dropBound({ paired: { n: 300, lost: 3, gained: 0 }, agreement: { n: 5300, disagree: 40 } }, 0.05).bound;
    expect(more).toBeLessThan(alone);
  });
  it('rows needed: the scaled counts reach the bound, fewer do not', () => {
    const o = { paired: { n: 400, lost: 5, gained: 2 } };
    const need = rowsNeeded(o, 0.01, 0.05)!;
    expect(need).toBeGreaterThan(400);
    const f = need / 400;
    expect(dropBound({ paired: { n: need, lost: Math.round(5 * f), gained: Math.round(2 * f) } }, 0.05).bound).toBeLessThanOrEqual(0.01);
    expect(rowsNeeded({ paired: { n: 400, lost: 10, gained: 2 } }, 0.01, 0.05)).toBeUndefined();
  });
});

describe('Hoeffding–Bentkus bound for losses in [0, 1]', () => {
  it('covers the true mean of fractional losses in at least 1 − δ of draws', () => {
    const rnd = mulberry32(3);
    let broken = 0;
    const draws = 600, n = 60, delta = 0.1;
    // a scene's lost share: 0 with probability 0.9, else uniform on (0, 1): true mean 0.05
    for (let d = 0; d < draws; d++) {
      let s = 0;
      for (let i = 0; i < n; i++) s += rnd() < 0.9 ? 0 : rnd();
      if (hoeffdingBentkusUpper(s / n, n, delta) < 0.05) broken++;
    }
    expect(broken / draws).toBeLessThanOrEqual(delta + 3 * Math.sqrt(delta * (1 - delta) / draws));
  });
  it('is never below the observed mean and falls as n grows', () => {
    expect(hoeffdingBentkusUpper(0.02, 100, 0.05)).toBeGreaterThan(0.02);
    expect(hoeffdingBentkusUpper(0.02, 10000, 0.05)).toBeLessThan(hoeffdingBentkusUpper(0.02, 100, 0.05));
  });
});

describe('fixed-sequence testing (Learn-then-Test) controls the error over many settings', () => {
  it('choosing the boldest certified of 40 settings breaks the bound in at most δ of draws', () => {
    // 40 settings ordered cautious → cheap, true loss rates rising past the 2 % bound
    const settings = Array.from({ length: 40 }, (_, i) => 0.0005 * i * i / 10 + 0.001 * i);
    const maxDrop = 0.02, delta = 0.1, draws = 400, n = 800;
    const rnd = mulberry32(11);
    let broken = 0;
    for (let d = 0; d < draws; d++) {
      const lost = settings.map((p) => binomial(n, p, rnd));
      const seq = fixedSequence(settings.map((_, i) => i), (i) => dropBound({ paired: { n, lost: lost[i], gained: 0 } }, delta).bound <= maxDrop);
      const chosen = seq.passed.at(-1);
      if (chosen !== undefined && settings[chosen] > maxDrop) broken++;
    }
    expect(broken / draws).toBeLessThanOrEqual(delta + 3 * Math.sqrt(delta * (1 - delta) / draws));
    // and the naive rule (cheapest whose observed drop passes) breaks it far more often: the winner's curse
    let naive = 0;
    for (let d = 0; d < draws; d++) {
      const lost = settings.map((p) => binomial(n, p, rnd));
      let c = -1;
      for (let i = 0; i < settings.length; i++) if (lost[i] / n <= maxDrop) c = i;
      if (c >= 0 && settings[c] > maxDrop) naive++;
    }
    expect(naive / draws).toBeGreaterThan(0.3);
  });
});

// Variance-adaptive bounds on means of bounded values (lib/certify/mean.ts). Reference values from an independent
// NumPy implementation (scripts/make-mean-reference.py): Maurer & Pontil 2009, Theorem 4, in closed form, and the
// betting capital of Waudby-Smith & Ramdas 2023 on a grid of m (no bisection).
describe('empirical Bernstein and betting bounds on a mean', () => {
  const mref = JSON.parse(readFileSync(new URL('./fixtures/certify/mean-reference.json', import.meta.url), 'utf8'));

  it('equal the NumPy reference: the closed form, and the betting bound to the reference grid\'s step', () => {
    for (const c of mref.cases) {
      expect(empiricalBernsteinUpper(c.values, c.delta)).toBeCloseTo(c.bernstein, 12);
      expect(Math.abs(bettingUpper(c.values, c.delta) - c.betting)).toBeLessThanOrEqual(1.5e-6);
    }
    // on [−1, 1] the same values, rescaled, give the rescaled bound (Maurer & Pontil's range factor)
    const c = mref.cases[6], v = c.values.map((x: number) => 2 * x - 1);
    expect(bettingUpper(v, c.delta, -1, 1)).toBeCloseTo(2 * bettingUpper(c.values, c.delta) - 1, 12);
    expect(empiricalBernsteinUpper(v, c.delta, -1, 1)).toBeCloseTo(2 * c.bernstein - 1, 12);
  });

  it('cover the true mean in at least 1 − δ of draws (skewed, mostly-zero, and spread values)', () => {
    // the kinds of per-scene net shares a stream policy shows: most 0, a few lost runs, a few gains
    const rnd = mulberry32(29);
    const draws = 800, delta = 0.1, slack = 3 * Math.sqrt((delta * (1 - delta)) / draws);
    const kinds: [string, () => number, number][] = [
      ['net: 80 % zero, 15 % lose U(0, 0.4), 5 % gain U(0, 0.2)', () => { const u = rnd(); return u < 0.8 ? 0 : u < 0.95 ? 0.4 * rnd() : -0.2 * rnd(); }, 0.15 * 0.2 - 0.05 * 0.1],
      ['net: 97 % zero, 3 % lose a whole scene', () => (rnd() < 0.03 ? 1 : 0), 0.03],
      ['net: uniform on [−1, 1]', () => 2 * rnd() - 1, 0],
    ];
    for (const [name, draw, mu] of kinds) for (const n of [40, 300]) {
      let bet = 0, eb = 0;
      for (let d = 0; d < draws; d++) {
        const x = Array.from({ length: n }, draw);
        if (bettingUpper(x, delta, -1, 1) < mu) bet++;
        if (empiricalBernsteinUpper(x, delta, -1, 1) < mu) eb++;
      }
      console.log(`mean bounds, ${name}, n ${n}: betting broken ${bet}/${draws}, empirical Bernstein ${eb}/${draws} (allowed ≈ ${delta * draws})`);
      expect(bet / draws).toBeLessThanOrEqual(delta + slack);
      expect(eb / draws).toBeLessThanOrEqual(delta + slack);
    }
  });

  it('on paired net shares, far tighter than Hoeffding–Bentkus on lost and gained apart; never below the mean', () => {
    // 460 scenes: 1 in 10 loses 5 % of its frames, 1 in 20 gains 4 % (net mean 0.3 %). The paired form bounds the
    // net share directly; the old form bounded the lost share above and the gained share below, δ/2 each.
    const lost = Array.from({ length: 460 }, (_, i) => (i % 10 === 3 ? 0.05 : 0)), gained = Array.from({ length: 460 }, (_, i) => (i % 20 === 7 ? 0.04 : 0));
    const net = lost.map((l, i) => l - gained[i]), mean = 0.005 - 0.002;
    const bet = bettingUpper(net, 0.05, -1, 1), eb = empiricalBernsteinUpper(net, 0.05, -1, 1);
    const apart = hoeffdingBentkusUpper(0.005, 460, 0.025) - Math.max(0, 1 - hoeffdingBentkusUpper(1 - 0.002, 460, 0.025));
    console.log(`460 scenes, net mean 0.3 %: betting ${(bet * 100).toFixed(2)} pp, empirical Bernstein ${(eb * 100).toFixed(2)} pp, Hoeffding–Bentkus apart ${(apart * 100).toFixed(2)} pp`);
    expect(bet).toBeGreaterThan(mean);
    expect(eb).toBeGreaterThan(mean);
    expect(bet).toBeLessThan(apart / 1.5);
    // on lost shares alone in [0, 1] the range caps the bets (a scene may lose all its frames): no better than the binomial-like bound
    expect(bettingUpper(lost, 0.05)).toBeGreaterThan(0.005);
    expect(bettingUpper([], 0.05)).toBe(1);
    expect(empiricalBernsteinUpper([0.5], 0.05)).toBe(1);
    expect(() => bettingUpper([1.5], 0.05)).toThrow(/outside/);
    expect(() => bettingUpper([0.5], 1)).toThrow(/δ/);
  });
});

// Two fixed sequences at δ/2 each, a finished one handing its level on (lib/certify/sequence.ts: a graphical
// procedure of chains, Bretz et al. 2009; its error control by the sequential rejection principle, Goeman & Solari 2010).
describe('chained fixed sequences', () => {
  it('split δ, hand a finished chain\'s level on, and pass a setting standing in both chains once', () => {
    const levels: [string, number][] = [];
    // 'a' passes at any level, 'b' needs δ/2, 'c' never passes
    const need: Record<string, number> = { a: 0, b: 0.05, c: Infinity };
    const r = chainedSequences([['a'], ['b', 'c'], ['a', 'c']], 0.1, (t, level) => { levels.push([t, level]); return level >= need[t] - 1e-12; });
    expect(r.passed).toEqual(['a', 'b']);
    expect(r.failed).toEqual([undefined, 'c', 'c']);
    // 'a' heads chains 1 and 3 at once: tested once, at 2δ/3; chain 1, finished, hands its δ/3 to chains 2 and 3,
    // so 'b' is tested at δ/3 + δ/6 = δ/2 (chain 3, now at 'c', keeps its δ/2: nothing gives 'c' more)
    expect(levels.filter(([t]) => t === 'a')).toHaveLength(1);
    expect(levels[0][1]).toBeCloseTo(0.2 / 3, 12);
    expect(levels.filter(([t]) => t === 'b').map(([, l]) => l)).toEqual([expect.closeTo(0.05, 12)]);
    expect(levels.filter(([t]) => t === 'c').every(([, l]) => l <= 0.1 + 1e-12)).toBe(true);
    expect(chainedSequences([], 0.1, () => true)).toEqual({ passed: [], failed: [] });
    // weights: chain 1 holds δ/4, chain 2 3δ/4; 'b' needs δ/2, so passes only once 'a' has finished chain 1
    const seen: number[] = [];
    expect(chainedSequences([['a'], ['b']], 0.1, (t, l) => { if (t === 'b') seen.push(l); return l >= need[t] - 1e-12; }, [0.25, 0.75]).passed).toEqual(['a', 'b']);
    expect(seen).toEqual([expect.closeTo(0.1, 12)]);
    expect(() => chainedSequences([['a'], ['b']], 0.1, () => true, [0.5, 0.6])).toThrow(/weights/);
  });

  it('keep the family-wise error within δ by simulation, and pass where one badly ordered sequence stops', () => {
    // 30 settings, true loss rates rising with cost saved, but a few cautious-looking ones (first in chain A) are bad;
    // chain B is ordered by the true rates. Broken: any passed setting whose true rate exceeds the promise.
    const truth = Array.from({ length: 30 }, (_, i) => 0.0004 * i), maxDrop = 0.006, delta = 0.1, n = 3000, draws = 400;
    const bad = [20, 25]; // rates 0.8 % and 1 %, over the promise
    const chainA = [...bad, ...truth.map((_, i) => i).filter((i) => !bad.includes(i))], chainB = truth.map((_, i) => i);
    const rnd = mulberry32(5);
    let broken = 0, brokenOne = 0, chained = 0, single = 0;
    for (let d = 0; d < draws; d++) {
      const lost = truth.map((p) => binomial(n, p, rnd));
      const ok = (i: number, level: number) => clopperPearsonUpper(lost[i], n, level) <= maxDrop;
      const r = chainedSequences([chainA, chainB], delta, ok);
      if (r.passed.some((i) => truth[i] > maxDrop)) broken++;
      chained += r.passed.length ? Math.max(...r.passed) : 0;
      const f = fixedSequence(chainA, (i) => ok(i, delta));
      if (f.passed.some((i) => truth[i] > maxDrop)) brokenOne++;
      single += f.passed.length ? Math.max(...f.passed) : 0;
    }
    console.log(`chained sequences: broken ${broken}/${draws} (allowed ≈ ${delta * draws}); boldest passed on average ${(chained / draws).toFixed(1)} against ${(single / draws).toFixed(1)} for the one badly ordered sequence (broken ${brokenOne})`);
    expect(broken / draws).toBeLessThanOrEqual(delta + 3 * Math.sqrt(delta * (1 - delta) / draws));
    expect(chained / draws).toBeGreaterThan(single / draws + 5);
  });
});

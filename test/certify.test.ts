import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { binomialCdf, clopperPearsonLower, clopperPearsonUpper, dropBound, fixedSequence, hoeffdingBentkusUpper, incompleteBeta, rowsNeeded } from '../lib/certify/index.js';
import { mulberry32 } from '../lib/graph/build.js';

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

// Certified tuning keeps its promise on new data: coverage by simulation. Synthetic exit caches
// (test/helpers/exit-cache.ts) come from one fixed generator, so a chosen setting's true drop can be
// measured on a large population drawn from it. Over many independent tuning draws, the share whose
// chosen setting breaks --max-drop on the population must stay at most 1 − C plus sampling slack
// (the guarantee of fixed-sequence testing: Angelopoulos, Bates, Candès, Jordan & Lei 2021,
// "Learn then Test"; the bounds: Clopper & Pearson 1934).
import { describe, expect, it } from 'vitest';
import { syntheticCache, syntheticCosts } from './helpers/exit-cache.js';
import { tune } from '../lib/tune/search.js';
import { preparePart, scoreTable, tally, type Table } from '../lib/tune/evaluate.js';
import { makeCache, reachOf } from '../lib/tune/cache.js';
import type { FramePolicy, ScoreKind } from '../lib/policy/index.js';

const E = 3, C = 5;
const costs = syntheticCosts(E);
const reach = reachOf(costs, E);
const pop = syntheticCache(200_000, E, C, 424242);
const popPart = preparePart(pop, Int32Array.from({ length: pop.samples }, (_, i) => i));
const tables = new Map<ScoreKind, Table>((['confidence', 'margin', 'entropy'] as const).map((k) => [k, scoreTable(pop, popPart, k)]));
const hist = new Int32Array(E + 1), cost = new Float64Array(E + 1);

/** True drop (fraction) of a score-threshold policy: on the population, in the tuner's own oriented form. */
function trueDrop(p: FramePolicy): number {
  if (p.kind !== 'confidence' && p.kind !== 'margin' && p.kind !== 'entropy') throw new Error(`unexpected kind ${p.kind}`);
  const th = Float64Array.from(p.thresholds, (t) => (t === null ? Infinity : p.kind === 'entropy' ? -t : t));
  const t = tally(tables.get(p.kind)!, popPart, th, E, cost, hist);
  return (popPart.fullCorrect - t.correct) / popPart.n;
}

describe('certified tuning: coverage over random tuning draws', () => {
  it('the chosen setting breaks --max-drop on new data in at most 1 − C of 200 draws; the naive choice breaks it far more often', () => {
    const draws = 200, n = 1500, maxDrop = 2, confidence = 0.9;
    let broken = 0, certified = 0, naiveBroken = 0, naiveChosen = 0, saving = 0;
    for (let d = 0; d < draws; d++) {
      const r = tune(syntheticCache(n, E, C, 1000 + d), costs, { maxDrop, confidence, grid: 16, kinds: ['confidence', 'margin', 'entropy'] });
      const g = r.guarantee!;
      if (g.certified) {
        certified++;
        saving += 1 - r.chosen.held.meanMacs / r.full.held.meanMacs;
        // the promise, on the population (its own sampling error: ~0.03 points at these rates)
        if (trueDrop(r.chosen.policy as FramePolicy) * 100 > maxDrop) broken++;
      }
      // the rule this replaces: the cheapest front point whose observed drop is within maxDrop
      let naive: FramePolicy | undefined, naiveCost = Infinity;
      for (const k of r.kinds) for (const p of k.front) if (p.cert!.estimate <= maxDrop && p.held.meanMacs < naiveCost) { naive = p.policy; naiveCost = p.held.meanMacs; }
      if (naive) { naiveChosen++; if (trueDrop(naive) * 100 > maxDrop) naiveBroken++; }
    }
    const slack = 3 * Math.sqrt(((1 - confidence) * confidence) / draws);
    console.log(`coverage (synthetic, ${draws} draws of ${n} samples, max drop ${maxDrop} pp, C = ${confidence}): ` +
      `certified in ${certified}, broken ${broken} (${((broken / draws) * 100).toFixed(1)} %, allowed ${((1 - confidence + slack) * 100).toFixed(1)} %), ` +
      `mean saving when certified ${((saving / Math.max(certified, 1)) * 100).toFixed(1)} %; naive rule broken ${naiveBroken} of ${naiveChosen}`);
    expect(broken / draws).toBeLessThanOrEqual(1 - confidence + slack);
    // the promise is not kept by never promising: most draws certify a cheaper setting
    expect(certified).toBeGreaterThan(draws / 2);
    expect(naiveBroken / draws).toBeGreaterThan(1 - confidence + slack);
  }, 120_000);
});

describe('labelled and unlabelled rows together', () => {
  it('keep the promise in at least C of 200 draws, and labels never make the saving worse than leaving them out', () => {
    // where unlabelled rows outnumber labelled ones the evidence is disagreement on all rows: the run with labels
    // must then be the run without them, draw for draw
    // each draw: 300 labelled rows and 3000 unlabelled rows of the same generator, tuned with the labels and with
    // the same 3300 rows as one unlabelled set (agreement with the full model alone)
    const draws = 200, maxDrop = 2, confidence = 0.9, kinds = ['confidence', 'margin', 'entropy'] as const;
    let broken = 0, brokenAlone = 0, worse = 0, sumWith = 0, sumAlone = 0, worst = 0;
    const popSaving = (p: FramePolicy) => {
      if (p.kind !== 'confidence' && p.kind !== 'margin' && p.kind !== 'entropy') return 0;
      const th = Float64Array.from(p.thresholds, (t) => (t === null ? Infinity : p.kind === 'entropy' ? -t : t));
      for (let k = 0; k <= E; k++) cost[k] = reach[k];
      return 1 - tally(tables.get(p.kind)!, popPart, th, E, cost, hist).cost / (popPart.n * reach[E]);
    };
    for (let d = 0; d < draws; d++) {
      const lab = syntheticCache(300, E, C, 7000 + d), free = syntheticCache(3000, E, C, 9000 + d);
      const u = makeCache(free.samples, E, C, free.logits);
      const both = tune(lab, costs, { maxDrop, confidence, grid: 16, kinds, unlabelled: u });
      const all = makeCache(3300, E, C, Float32Array.from([...lab.logits, ...free.logits]));
      const alone = tune(all, costs, { maxDrop, confidence, grid: 16, kinds });
      if (trueDrop(both.chosen.policy as FramePolicy) * 100 > maxDrop) broken++;
      if (trueDrop(alone.chosen.policy as FramePolicy) * 100 > maxDrop) brokenAlone++;
      // saving on the population (the cost the tuner counts, decision overhead aside: the same for both)
      const w = popSaving(both.chosen.policy as FramePolicy), a = popSaving(alone.chosen.policy as FramePolicy);
      sumWith += w; sumAlone += a;
      if (w < a - 0.01) worse++;
      worst = Math.max(worst, a - w);
    }
    const slack = 3 * Math.sqrt(((1 - confidence) * confidence) / draws);
    console.log(`300 labelled + 3000 unlabelled, ${draws} draws (max drop ${maxDrop}, C ${confidence}): broken ${broken} with labels, ${brokenAlone} without ` +
      `(allowed ${((1 - confidence + slack) * draws).toFixed(0)}); mean saving ${((sumWith / draws) * 100).toFixed(1)} % with labels, ${((sumAlone / draws) * 100).toFixed(1)} % without; ` +
      `worse by more than 1 point in ${worse} draws (at most ${(worst * 100).toFixed(1)} points)`);
    expect(broken / draws).toBeLessThanOrEqual(1 - confidence + slack);
    expect(sumWith).toBeGreaterThanOrEqual(sumAlone - 1e-9);
    expect(worst).toBeLessThanOrEqual(1e-12);
    expect(worse).toBe(0);
  }, 300_000);
});

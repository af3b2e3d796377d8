// Where to put the exits. Heads are fitted at every candidate cut at once; then
// each set of up to `maxExits` candidates is searched on the cached exit outputs
// of the search part, and the set whose forecast certified policy spends the
// fewest MACs wins. Fixed fractions would ignore where the heads are actually
// good; judging sets on the certification part would spend its evidence on the
// choice of set (a winner's curse over sets), so placement never sees it.
import type { Cut, CutPlan } from '../cuts/scan.js';
import { rankCuts } from '../cuts/scan.js';
import type { ExitCache } from '../tune/cache.js';
import { selectExits } from '../tune/model-capture.js';
import { forecast, type TuneOptions } from '../tune/search.js';
import type { FramePolicy } from '../policy/index.js';

/** Clean cuts that leave MACs on both sides, one per MAC share (the best there), spread out, at most `max`, in graph order. */
export function candidateCuts(plan: CutPlan, max: number): Cut[] {
  const picked: Cut[] = [];
  for (const { cut } of rankCuts(plan.candidates.filter((c) => c.clean), max)) {
    if (picked.length === max) break;
    if (cut.macFraction <= 0.005 || cut.macFraction >= 0.995) continue;
    if (picked.some((p) => Math.abs(p.macFraction - cut.macFraction) < 1e-9)) continue;
    picked.push(cut);
  }
  return picked.sort((a, b) => a.step - b.step);
}

/** All subsets of 0..n-1 of size 1..k, as ascending index lists, smaller sets first. */
export function subsets(n: number, k: number): number[][] {
  const out: number[][] = [];
  const rec = (start: number, cur: number[], size: number) => {
    if (cur.length === size) { out.push([...cur]); return; }
    for (let i = start; i < n; i++) { cur.push(i); rec(i + 1, cur, size); cur.pop(); }
  };
  for (let s = 1; s <= Math.min(k, n); s++) rec(0, [], s);
  return out;
}

export interface Placement {
  /** indices into the candidates */
  exits: number[];
  /** what certification is forecast to choose for this set, on the search part */
  forecast: { policy: FramePolicy; meanMacs: number; accuracy: number };
}

export interface PlacementSearch { chosen: Placement; tried: { exits: number[]; meanMacs: number; accuracy: number }[] }

/**
 * `cache`: the search part only. `reach[c]`: backbone MACs up to candidate c; `total`: the whole
 * backbone; `head[c]`: MACs of candidate c's head; `o.rows`: rows the certification part will have.
 * Sets are compared on the mean MACs of their forecast choice.
 */
export function choosePlacement(
  cache: ExitCache, reach: number[], total: number, head: number[], maxExits: number, o: TuneOptions & { rows: number },
  onSet?: (done: number, all: number) => void,
): PlacementSearch {
  const sets = subsets(cache.exits, maxExits);
  let best: Placement | undefined, bestCost = Infinity;
  const tried: PlacementSearch['tried'] = [];
  sets.forEach((s, i) => {
    const stage = s.map((c, j) => reach[c] - (j ? reach[s[j - 1]] : 0));
    stage.push(total - reach[s[s.length - 1]]);
    const f = forecast(selectExits(cache, s), { stage, head: s.map((c) => head[c]) }, o);
    tried.push({ exits: s, meanMacs: f.meanMacs, accuracy: f.accuracy });
    // Strictly cheaper only: on a tie the smaller (earlier listed) set stays.
    if (f.meanMacs < bestCost - 1e-9) { best = { exits: s, forecast: f }; bestCost = f.meanMacs; }
    onSet?.(i + 1, sets.length);
  });
  return { chosen: best!, tried };
}

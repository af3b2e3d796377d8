// Threshold search for the per-frame policies. For each policy kind: a
// Lagrangian coordinate search (minimise cost/full cost + λ·error rate, one
// exit's threshold at a time over fixed candidates, λ from accuracy-heavy to
// cost-heavy, each λ warm-started from the last) on the tune part; every
// setting evaluated joins a pool whose Pareto front (accuracy vs mean cost) is
// kept. Then the cheapest front point whose accuracy drop vs the full model is
// within maxDrop on both parts is chosen, its figures reported on the held-out
// part. The full model itself always qualifies, so the choice never breaks the
// bound. Everything iterates in fixed orders: same cache, same result.
import { OfframpError } from '../errors.js';
import { decisionCost, fullModel, worstCase, type FramePolicy, type ScoreKind } from '../policy/index.js';
import { reachOf, splitParts, type ExitCache, type ExitCosts } from './cache.js';
import type { Guarantee } from './guarantee.js';
import { patienceTable, preparePart, scoreTable, tally, type Part, type Table } from './evaluate.js';

export type FrameKind = FramePolicy['kind'];
export const TUNE_KINDS: readonly FrameKind[] = ['confidence', 'entropy', 'margin', 'patience', 'budget'];

export interface Eval { samples: number; accuracy: number; meanMacs: number; exitShare: number[] }
export interface Point<P = FramePolicy> { policy: P; tune: Eval; held: Eval }
export interface KindResult<P = FramePolicy> { kind: string; evaluated: number; front: Point<P>[]; chosen: Point<P> }
export interface TuneResult<P = FramePolicy> {
  labelled: boolean;
  maxDrop: number;
  split: { mode: 'interleave' | 'tail'; heldOut: number; tune: number; held: number };
  /** per exit (the final output last): MACs to have its output */
  reach: number[];
  full: Point<FramePolicy>;
  kinds: KindResult<P>[];
  /** cheapest admissible over all kinds */
  chosen: Point<P | FramePolicy>;
  settings: number;
  /** what the chosen setting promises on new data (certified tuning) */
  guarantee?: Guarantee;
}

export interface TuneOptions {
  /** percentage points of accuracy the chosen setting may lose against the full model (default 1) */
  maxDrop?: number;
  /** held-out share (default 0.5) */
  heldOut?: number;
  kinds?: readonly FrameKind[];
  /** threshold candidates per exit (default 32), quantiles of the tune part's scores */
  grid?: number;
  /** the score a budget is combined with (default confidence) */
  budgetScore?: ScoreKind;
}

const LAMBDAS = [1024, 512, 256, 128, 64, 32, 16, 8, 4, 2, 1, 0.5, 0.25];
/** The oriented threshold that always stops: confidence and margin are ≥ 0, −entropy ≥ −1. */
const ALWAYS: Record<ScoreKind, number> = { confidence: 0, margin: 0, entropy: -1 };

export interface Rec { th: Float64Array; cap: number; correct: number; cost: number; hist: Int32Array }

/** A kind's search space over one part: its table and the decision cost per exit where a decision is made. */
interface Space { table: Table; dc: number }

/** Pool of evaluated settings on one part. */
class Pool {
  recs: Rec[] = [];
  private hist: Int32Array;
  private cost: Float64Array;
  constructor(readonly part: Part, readonly reach: Float64Array) {
    this.hist = new Int32Array(part.exits + 1);
    this.cost = new Float64Array(part.exits + 1);
  }
  /** Evaluate; keep a copy when `keep`. */
  eval(sp: Space, th: Float64Array, cap: number, keep = true): Rec {
    const E = this.part.exits, cost = this.cost;
    let d = 0;
    for (let k = 0; k <= E; k++) { const here = k < E && k < cap && th[k] !== Infinity ? sp.dc : 0; cost[k] = this.reach[k] + d + here; d += here; }
    const t = tally(sp.table, this.part, th, cap, cost, this.hist);
    const r: Rec = { th: keep ? th.slice() : th, cap, correct: t.correct, cost: t.cost, hist: keep ? this.hist.slice() : this.hist };
    if (keep) this.recs.push(r);
    return r;
  }
}

/** Candidate oriented thresholds at exit k: never, always, and `grid` quantiles of the part's scores. */
function candidates(t: Table, n: number, k: number, grid: number, always: number): Float64Array {
  const col: number[] = [];
  for (let j = 0; j < n; j++) { const v = t.s[j * t.stride + k]; if (Number.isFinite(v)) col.push(v); }
  col.sort((a, b) => a - b);
  const out = new Set<number>([Infinity, always]);
  for (let g = 0; g < grid && col.length; g++) out.add(col[Math.round((g / Math.max(grid - 1, 1)) * (col.length - 1))]);
  return Float64Array.from([...out].sort((a, b) => b - a));
}

function coordinate(pool: Pool, sp: Space, cands: Float64Array[], cap: number, fullCost: number): void {
  const E = pool.part.exits, n = pool.part.n;
  const th = new Float64Array(E).fill(Infinity);
  const J = (r: Rec) => r.cost / (fullCost * n) + lambda * (n - r.correct) / n;
  let lambda = LAMBDAS[0];
  for (lambda of LAMBDAS) {
    let best = J(pool.eval(sp, th, cap));
    for (let pass = 0; pass < 4; pass++) {
      let moved = false;
      for (let k = 0; k < Math.min(cap, E); k++) {
        let bestV = th[k];
        for (const v of cands[k]) {
          if (v === th[k]) continue;
          const old = th[k];
          th[k] = v;
          const j = J(pool.eval(sp, th, cap));
          th[k] = old;
          if (j < best - 1e-12) { best = j; bestV = v; moved = true; }
        }
        th[k] = bestV;
      }
      if (!moved) break;
    }
  }
}

/** Pareto front of a pool: cheapest first, each strictly more accurate than every cheaper one. */
export function front<R extends { cost: number; correct: number }>(recs: R[]): R[] {
  const order = recs.map((r, i) => [r, i] as const).sort(([a, i], [b, j]) => a.cost - b.cost || b.correct - a.correct || i - j);
  const out: R[] = [];
  let best = -1;
  for (const [r] of order) if (r.correct > best) { out.push(r); best = r.correct; }
  return out;
}

export const evalOf = (r: { correct: number; cost: number; hist: ArrayLike<number> }, n: number): Eval => ({ samples: n, accuracy: n ? r.correct / n : 0, meanMacs: n ? r.cost / n : 0, exitShare: Array.from(r.hist, (h) => (n ? h / n : 0)) });

const jsonThreshold = (kind: ScoreKind, v: number): number | null => (v === Infinity ? null : kind === 'entropy' ? (v === 0 ? 0 : -v) : v);

/** Per-kind machinery: the table on a part, the decision cost, and how a setting becomes a policy. */
interface Kind { kind: FrameKind; space(c: ExitCache, p: Part): Space; runs(E: number): { cap: number; search: boolean }[]; policy(r: Rec, reach: Float64Array, E: number, C: number): FramePolicy }

function kindOf(kind: FrameKind, budgetScore: ScoreKind, classes: number): Kind {
  const score = kind === 'budget' ? budgetScore : kind === 'patience' ? undefined : kind;
  const dc = kind === 'patience' ? decisionCost({ kind, thresholds: [], patience: 1 }, 0, classes) : score ? decisionCost({ kind: score, thresholds: [0] }, 0, classes) : 0;
  return {
    kind,
    space: (c, p) => ({ table: score ? scoreTable(c, p, score) : patienceTable(c, p), dc }),
    // budget: the static exits, then each inner cap searched with its score
    runs: (E) => (kind === 'budget' ? [...Array.from({ length: E + 1 }, (_, cap) => ({ cap, search: false })), ...Array.from({ length: Math.max(E - 1, 0) }, (_, i) => ({ cap: i + 1, search: true }))] : [{ cap: E, search: kind !== 'patience' }]),
    policy: (r, reach, E, C) => {
      if (kind === 'patience') return { kind, thresholds: [], patience: r.th[0] };
      if (kind !== 'budget') return { kind, thresholds: [...r.th].map((v) => jsonThreshold(kind, v)) };
      const searched = [...r.th].some((v, k) => k < r.cap && v !== Infinity);
      const p: FramePolicy = searched
        ? { kind: 'budget', thresholds: [...r.th].map((v, k) => (k < r.cap ? jsonThreshold(budgetScore, v) : null)), budget: 0, score: budgetScore }
        : { kind: 'budget', thresholds: [], budget: 0 };
      p.budget = worstCase(p, reach, E, C)[r.cap];
      return p;
    },
  };
}

export function tune(c: ExitCache, costs: ExitCosts, o: TuneOptions = {}): TuneResult {
  const maxDrop = o.maxDrop ?? 1, heldOut = o.heldOut ?? 0.5, grid = o.grid ?? 32, E = c.exits;
  if (!(maxDrop >= 0)) throw new OfframpError('usage', `--max-drop must be ≥ 0 percentage points, not ${maxDrop}`);
  if (c.samples < 2) throw new OfframpError('data', 'tuning needs at least 2 samples');
  const reach = reachOf(costs, E);
  const parts = splitParts(c.samples, heldOut, 'interleave');
  const tuneP = preparePart(c, parts.tune), heldP = preparePart(c, parts.held);
  const fullPolicy = fullModel(E);
  const fullTh = new Float64Array(E).fill(Infinity);
  const fullSp: Space = { table: { s: new Float64Array(Math.max(tuneP.n, heldP.n) * Math.max(E, 4)).fill(-Infinity), stride: Math.max(E, 4) }, dc: 0 };
  const full: Point = { policy: fullPolicy, tune: evalOf(new Pool(tuneP, reach).eval(fullSp, fullTh, E), tuneP.n), held: evalOf(new Pool(heldP, reach).eval(fullSp, fullTh, E), heldP.n) };
  const fits = (r: Rec, p: Part) => (p.fullCorrect - r.correct) * 100 <= maxDrop * p.n;
  let settings = 0;
  const kinds: KindResult[] = [];

  for (const kind of o.kinds ?? TUNE_KINDS) {
    const k = kindOf(kind, o.budgetScore ?? 'confidence', c.classes);
    const sp = k.space(c, tuneP);
    const pool = new Pool(tuneP, reach);
    for (const run of k.runs(E)) {
      // a cap whose next stage costs nothing would be taken deeper by the runner: the deeper cap covers it
      if (kind === 'budget' && run.cap < E && reach[run.cap + 1] === reach[run.cap]) continue;
      const th = new Float64Array(E).fill(Infinity);
      if (kind === 'patience') { for (let p = 1; p <= Math.max(E, 1); p++) pool.eval(sp, th.fill(p), E); continue; }
      if (!run.search) { pool.eval(sp, th, run.cap); continue; }
      const always = ALWAYS[kind === 'budget' ? o.budgetScore ?? 'confidence' : (kind as ScoreKind)];
      const cands = Array.from({ length: E }, (_, x) => candidates(sp.table, tuneP.n, x, grid, always));
      coordinate(pool, sp, cands, run.cap, reach[E]);
    }
    settings += pool.recs.length;
    const heldSp = k.space(c, heldP);
    const heldPool = new Pool(heldP, reach);
    const points: Point[] = [];
    let chosen: Point = full, chosenCost = full.held.meanMacs;
    for (const r of front(pool.recs)) {
      const h = heldPool.eval(heldSp, r.th, r.cap, false);
      const pt: Point = { policy: k.policy(r, reach, E, c.classes), tune: evalOf(r, tuneP.n), held: evalOf({ ...h, hist: h.hist.slice() }, heldP.n) };
      points.push(pt);
      if (fits(r, tuneP) && fits(h, heldP) && pt.held.meanMacs < chosenCost) { chosen = pt; chosenCost = pt.held.meanMacs; }
    }
    kinds.push({ kind, evaluated: pool.recs.length, front: points, chosen });
  }
  let chosen: Point = full;
  for (const r of kinds) if (r.chosen.held.meanMacs < chosen.held.meanMacs) chosen = r.chosen;
  return {
    labelled: c.labelled, maxDrop, split: { mode: 'interleave', heldOut, tune: tuneP.n, held: heldP.n },
    reach: [...reach], full, kinds, chosen, settings,
  };
}


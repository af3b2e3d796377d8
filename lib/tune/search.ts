// Threshold search and certification for the per-frame policies.
//
// Search (the search part only): for each policy kind a Lagrangian coordinate
// search (minimise cost/full cost + λ·error rate, one exit's threshold at a time
// over fixed candidates, λ from accuracy-heavy to cost-heavy, each λ
// warm-started from the last); every setting evaluated joins a pool whose
// Pareto front (accuracy vs mean cost) is kept.
//
// Certification (the disjoint certification part): the fronts of all kinds,
// merged and ordered from cautious (most MACs on the search part) to cheap, are
// tested in that fixed order (Learn-then-Test's fixed-sequence testing) with an
// upper confidence bound on the accuracy drop at δ = 1 − confidence, stopping
// at the first that fails. Every setting that passed keeps the promise with
// probability ≥ confidence, jointly, so any of them may be chosen: the cheapest
// whose thresholds nudged one grid step cheaper still keep the drop within
// maxDrop as observed (robustness; see `nudge`). When none does, the full model is kept and the result says so.
//
// With unlabelled rows (`--unlabelled`): they are split like the data's rows and both search parts search (an
// unlabelled row's label is the full model's answer). The evidence is fixed by sizes alone: disagreement with the
// full model on all certifying rows, or, with labels and fewer unlabelled rows than labelled ones, the paired drop
// on the labels. Where disagreement bounds, labels change nothing: the run is the one without them.
// Everything iterates in fixed orders: same cache, same result.
import { OfframpError } from '../errors.js';
import { argmax, decisionCost, fullModel, worstCase, type FramePolicy, type ScoreKind } from '../policy/index.js';
import { dropBound, fixedSequence, rowsNeeded, type AgreementCounts, type DropBound, type PairedCounts } from '../certify/index.js';
import { reachOf, rowsOf, splitParts, type ExitCache, type ExitCosts } from './cache.js';
import { discordant, patienceTable, preparePart, scoreTable, tally, type Discordant, type Part, type Table } from './evaluate.js';
import { recordedGuarantee, type Guarantee } from './guarantee.js';
import { roundNoise } from '../util/json.js';

export type FrameKind = FramePolicy['kind'];
export const TUNE_KINDS: readonly FrameKind[] = ['confidence', 'entropy', 'margin', 'patience', 'budget'];

export interface Eval { samples: number; accuracy: number; meanMacs: number; exitShare: number[] }
/** A front point's certification on the certification part, percentage points. */
export interface PointBound {
  /** observed drop against the full model */
  estimate: number;
  /** upper confidence bound on the drop at the run's confidence */
  bound: number;
  /** in the fixed sequence, and reached by it */
  tested: boolean;
  passed: boolean;
  /** the observed drop with every threshold one grid step cheaper (absent for settings without thresholds) */
  nudged?: number;
}
export interface Point<P = FramePolicy> { policy: P; tune: Eval; held: Eval; cert?: PointBound }
export interface KindResult<P = FramePolicy> { kind: string; evaluated: number; front: Point<P>[]; chosen: Point<P> }
export interface TuneResult<P = FramePolicy> {
  labelled: boolean;
  maxDrop: number;
  /** tune: the search part; held: the certification part (heldOut: its share) */
  split: { mode: 'interleave' | 'tail'; heldOut: number; tune: number; held: number };
  /** per exit (the final output last): MACs to have its output */
  reach: number[];
  full: Point<FramePolicy>;
  kinds: KindResult<P>[];
  /** cheapest admissible over all kinds */
  chosen: Point<P | FramePolicy>;
  settings: number;
  /** what the chosen setting promises on new data (absent from tuners that do not certify) */
  guarantee?: Guarantee;
}

export interface TuneOptions {
  /** percentage points of accuracy the chosen setting may lose against the full model (default 1) */
  maxDrop?: number;
  /** share of the data that certifies (default 0.5); the rest searches */
  heldOut?: number;
  /** C: the promise holds with probability ≥ C over the draw of the data (default 0.95) */
  confidence?: number;
  /** extra rows without labels (their labels are the full model's answers): they tighten the disagreement term */
  unlabelled?: ExitCache;
  /** prefer settings whose thresholds nudged one grid step cheaper also pass (default true) */
  robust?: boolean;
  kinds?: readonly FrameKind[];
  /** threshold candidates per exit (default 32), quantiles of the tune part's scores */
  grid?: number;
  /** the score a budget is combined with (default confidence) */
  budgetScore?: ScoreKind;
}

const LAMBDAS = [1024, 512, 256, 128, 64, 32, 16, 8, 4, 2, 1, 0.5, 0.25];
/** The oriented threshold that always stops: confidence and margin are ≥ 0, −entropy ≥ −1. */
const ALWAYS: Record<ScoreKind, number> = { confidence: 0, margin: 0, entropy: -1 };

export interface Rec { th: Float64Array; cap: number; correct: number; cost: number; lost: number; hist: Int32Array }

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
    const r: Rec = { th: keep ? th.slice() : th, cap, correct: t.correct, cost: t.cost, lost: t.lost, hist: keep ? this.hist.slice() : this.hist };
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

/**
 * The candidates certification tests, cheapest first: each at most as risky as every cheaper one (and dearer).
 * Ranking by accuracy alone would let a setting that was lucky on the search part (many rows lost,
 * more gained) shadow the cautious settings before it; a risk that grows with the discordant rows does not.
 */
export function riskFront<R extends { cost: number }>(recs: R[], risk: (r: R) => number): R[] {
  const order = recs.map((r, i) => [r, risk(r), i] as const).sort(([a, ra, i], [b, rb, j]) => a.cost - b.cost || ra - rb || i - j);
  const out: R[] = [];
  let best = Infinity, lastCost = NaN;
  // ties in risk are kept (dearest last): zero-loss settings of every cost are the cautious end of the sequence
  for (const [r, x] of order) if (x < best || (x === best && r.cost !== lastCost)) { out.push(r); best = x; lastCost = r.cost; }
  return out;
}

/**
 * Ranking only (certification uses the exact bounds): the paired drop on the search part plus
 * z = √(2 ln 1/δ) standard errors, whose variance for rare discordant rows is (lost + gained)/n².
 */
const riskOn = (part: Part, delta: number) => {
  const z = Math.sqrt(2 * Math.log(1 / delta));
  return (r: Rec) => { const gained = r.lost - (part.fullCorrect - r.correct); return (r.lost - gained + z * Math.sqrt(r.lost + gained)) / Math.max(part.n, 1); };
};

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

/**
 * The share of the data that certifies by default. Half: on synthetic caches of 3000 samples (1 point,
 * C = 0.95, six seeds) the certified saving was 36 % with half, 34 % with 0.6 and 33 % with 0.7 — a
 * weaker search costs more than the narrower bound gains; at 10 000 samples all three gave 37–38 %.
 */
export const CERTIFY_SHARE = 0.5;

/** A kind's searched pool on the search part, with what certification needs to re-evaluate its settings. */
interface Searched { k: Kind; sp: Space; recs: Rec[]; front: Rec[]; cands?: Float64Array[] }

function search(c: ExitCache, part: Part, reach: Float64Array, kinds: readonly FrameKind[], grid: number, budgetScore: ScoreKind, risk: (r: Rec) => number): Searched[] {
  const E = c.exits;
  return kinds.map((kind) => {
    const k = kindOf(kind, budgetScore, c.classes);
    const sp = k.space(c, part);
    const pool = new Pool(part, reach);
    const always = ALWAYS[kind === 'budget' ? budgetScore : kind === 'patience' ? 'confidence' : (kind as ScoreKind)];
    const cands = kind === 'patience' ? undefined : Array.from({ length: E }, (_, x) => candidates(sp.table, part.n, x, grid, always));
    for (const run of k.runs(E)) {
      // a cap whose next stage costs nothing would be taken deeper by the runner: the deeper cap covers it
      if (kind === 'budget' && run.cap < E && reach[run.cap + 1] === reach[run.cap]) continue;
      const th = new Float64Array(E).fill(Infinity);
      if (kind === 'patience') { for (let p = 1; p <= Math.max(E, 1); p++) pool.eval(sp, th.fill(p), E); continue; }
      if (!run.search) { pool.eval(sp, th, run.cap); continue; }
      coordinate(pool, sp, cands!, run.cap, reach[E]);
    }
    return { k, sp, recs: pool.recs, front: riskFront(pool.recs, risk), cands };
  });
}

/** A setting that can never stop early is the full model: nothing to certify. */
const isFull = (r: Rec, E: number) => r.cap >= E && r.th.every((v) => v === Infinity);

/**
 * The robustness neighbour: every threshold below the cap one grid candidate cheaper (stopping more
 * often), as if a new site's scores ran a quantile step higher. Settings without score thresholds
 * (patience, static budgets) have none: their decisions do not hinge on a threshold's exact value.
 */
function nudge(r: Rec, cands: Float64Array[] | undefined): Float64Array | undefined {
  if (!cands) return undefined;
  const E = r.th.length, cap = Math.min(r.cap, E);
  let any = false;
  for (let k = 0; k < cap; k++) if (r.th[k] !== Infinity) any = true;
  if (!any) return undefined;
  const out = r.th.slice();
  for (let k = 0; k < cap; k++) {
    const i = cands[k].indexOf(r.th[k]);
    if (i >= 0 && i + 1 < cands[k].length) out[k] = cands[k][i + 1];
  }
  return out;
}

/**
 * The counts a drop bound reads: paired counts when labelled, agreement counts from the part (and the
 * unlabelled rows). With labels, the unlabelled rows join only when there are at least as many as labelled
 * ones: the combined bound splits δ four ways and is looser with few of them. The rule reads sizes only,
 * never outcomes, so it is fixed before the data speaks.
 */
function countsOf(labelled: boolean, n: number, d: Discordant, extra?: { n: number; d: Discordant }): { paired?: PairedCounts; agreement?: AgreementCounts } {
  const agreement = extra ? { n: n + extra.n, disagree: d.disagree + extra.d.disagree } : { n, disagree: d.disagree };
  if (!labelled) return { agreement };
  return { paired: { n, lost: d.lost, gained: d.gained }, ...(extra && extra.n >= n ? { agreement } : {}) };
}

/**
 * With unlabelled rows besides the data, which evidence bounds every setting: disagreement with the full model on
 * all rows (labelled ones counted as unlabelled too: disagreement bounds the drop whatever the labels), or, where
 * labelled rows outnumber the unlabelled ones, the paired drop on the labelled rows. The rule reads sizes only.
 * Where disagreement bounds, the run is the run without labels on the same rows, setting for setting: labels
 * cannot make it worse. Chosen on the search part per setting or per run, the form was tried and did worse on
 * average over 200 synthetic draws (a form chosen on a few hundred search rows is chosen by luck).
 */
export type MixedForm = 'disagreement' | 'paired' | 'paired+disagreement';

function mixedCounts(form: MixedForm, nl: number, dl: Discordant, nu: number, du: Discordant): { paired?: PairedCounts; agreement?: AgreementCounts } {
  const paired = { n: nl, lost: dl.lost, gained: dl.gained }, agreement = { n: nl + nu, disagree: dl.disagree + du.disagree };
  return form === 'paired' ? { paired } : form === 'disagreement' ? { agreement } : { paired, agreement };
}

/** The observed drop of some counts (what dropBound estimates), without computing a bound. */
const observed = (o: { paired?: PairedCounts; agreement?: AgreementCounts }): number =>
  o.paired ? (o.paired.n ? (o.paired.lost - o.paired.gained) / o.paired.n : 0) : o.agreement!.n ? o.agreement!.disagree / o.agreement!.n : 0;

/** dropBound, remembered by its counts: many front points share them, and each bound is a few bisections. */
function boundMemo(delta: number): (o: { paired?: PairedCounts; agreement?: AgreementCounts }) => DropBound {
  const seen = new Map<string, DropBound>();
  return (o) => {
    const key = `${o.paired ? `${o.paired.n},${o.paired.lost},${o.paired.gained}` : ''};${o.agreement ? `${o.agreement.n},${o.agreement.disagree}` : ''}`;
    let b = seen.get(key);
    if (!b) seen.set(key, (b = dropBound(o, delta)));
    return b;
  };
}

const METHOD: Record<DropBound['method'], string> = {
  paired: 'paired drop (Clopper–Pearson on lost and gained rows)',
  disagreement: 'disagreement with the full model (Clopper–Pearson)',
  'paired+disagreement': 'paired drop, lost rows bounded also by disagreement on unlabelled rows (Clopper–Pearson)',
};

export function tune(c: ExitCache, costs: ExitCosts, o: TuneOptions = {}): TuneResult {
  const maxDrop = o.maxDrop ?? 1, heldOut = o.heldOut ?? CERTIFY_SHARE, grid = o.grid ?? 32, E = c.exits;
  const confidence = o.confidence ?? 0.95, delta = 1 - confidence;
  if (!(maxDrop >= 0)) throw new OfframpError('usage', `--max-drop must be ≥ 0 percentage points, not ${maxDrop}`);
  if (!(confidence > 0 && confidence < 1)) throw new OfframpError('usage', `--confidence must lie strictly between 0 and 1, not ${confidence}`);
  if (c.samples < 2) throw new OfframpError('data', 'tuning needs at least 2 samples');
  const u = o.unlabelled;
  if (u && (u.exits !== E || u.classes !== c.classes)) throw new OfframpError('data', `unlabelled rows have ${u.exits} exits and ${u.classes} classes, expected ${E} and ${c.classes}`);
  const reach = reachOf(costs, E);
  const parts = splitParts(c.samples, heldOut, 'interleave');
  // Unlabelled rows besides the data (`mixed`): they are split like the data's rows; the search runs on both search
  // parts (an unlabelled row's label is the full model's answer) and certification reads both certification parts,
  // in the form the sizes fix (MixedForm): with labels and fewer unlabelled rows, the paired drop on the labels
  const mixed = !!(u && u.samples >= 2);
  const form: MixedForm | undefined = mixed ? (c.labelled && c.samples > u!.samples ? 'paired' : 'disagreement') : undefined;
  const uParts = mixed ? splitParts(u!.samples, heldOut, 'interleave') : undefined;
  // the search aims at what will certify: where unlabelled rows outnumber labelled ones the disagreement form
  // usually bounds best, so it searches on agreement with the full model (as without labels); else on the labels
  const searchCache = mixed ? concatRows(rowsOf(form === 'disagreement' ? asUnlabelled(c) : c, parts.tune), rowsOf(u!, uParts!.tune)) : c;
  const tuneP = preparePart(searchCache, mixed ? Int32Array.from({ length: searchCache.samples }, (_, i) => i) : parts.tune), heldP = preparePart(c, parts.held);
  const extraP = u && u.samples ? preparePart(u, mixed ? uParts!.held : Int32Array.from({ length: u.samples }, (_, i) => i)) : undefined;
  const fullPolicy = fullModel(E);
  const fullTh = new Float64Array(E).fill(Infinity);
  const fullSp: Space = { table: { s: new Float64Array(Math.max(tuneP.n, heldP.n) * Math.max(E, 4)).fill(-Infinity), stride: Math.max(E, 4) }, dc: 0 };
  const full: Point = { policy: fullPolicy, tune: evalOf(new Pool(tuneP, reach).eval(fullSp, fullTh, E), tuneP.n), held: evalOf(new Pool(heldP, reach).eval(fullSp, fullTh, E), heldP.n) };

  const risk = riskOn(tuneP, delta);
  const searched = search(searchCache, tuneP, reach, o.kinds ?? TUNE_KINDS, grid, o.budgetScore ?? 'confidence', risk);
  const settings = searched.reduce((a, s) => a + s.recs.length, 0);

  // Every front point on the certification part: its figures and its bound.
  const bound = boundMemo(delta);
  const certOf = new Map<Rec, { pt: Point; counts: ReturnType<typeof countsOf>; b: DropBound; s: Searched; sp: Space; xsp?: Space; heldCost: number }>();
  const kinds: KindResult[] = [];
  // the counts a setting's bound reads on the certification part (in the form the sizes fix when mixed)
  const countsAt = (sp: Space, xsp: Space | undefined, th: Float64Array, cap: number, form?: MixedForm) => form
    ? mixedCounts(form, heldP.n, discordant(sp.table, heldP, th, cap), extraP!.n, discordant(xsp!.table, extraP!, th, cap))
    : countsOf(c.labelled, heldP.n, discordant(sp.table, heldP, th, cap), xsp && { n: extraP!.n, d: discordant(xsp.table, extraP!, th, cap) });
  // The fixed sequence's order: the merged front, cautious first, ordered by the search part alone.
  const ordered = riskFront(searched.flatMap((s) => s.front), risk).reverse().filter((r) => !isFull(r, E) && r.cost < full.tune.meanMacs * tuneP.n);
  for (const s of searched) {
    const sp = s.k.space(c, heldP), xsp = extraP && s.k.space(u!, extraP);
    const heldPool = new Pool(heldP, reach), extraPool = mixed ? new Pool(extraP!, reach) : undefined;
    const points: Point[] = [];
    for (const r of s.front) {
      const h = heldPool.eval(sp, r.th, r.cap, false);
      // the cost compared when choosing: on every certifying row, unlabelled ones included
      const heldCost = (h.cost + (extraPool ? extraPool.eval(xsp!, r.th, r.cap, false).cost : 0)) / (heldP.n + (mixed ? extraP!.n : 0));
      const counts = countsAt(sp, xsp, r.th, r.cap, form);
      const b = bound(counts);
      const pt: Point = {
        policy: s.k.policy(r, reach, E, c.classes), tune: evalOf(r, tuneP.n), held: evalOf({ ...h, hist: h.hist.slice() }, heldP.n),
        cert: { estimate: roundNoise(b.estimate * 100), bound: b.bound * 100, tested: false, passed: false },
      };
      points.push(pt);
      certOf.set(r, { pt, counts, b, s, sp, xsp, heldCost });
    }
    kinds.push({ kind: s.k.kind, evaluated: s.recs.length, front: points, chosen: full });
  }

  const seq = fixedSequence(ordered, (r) => certOf.get(r)!.b.bound * 100 <= maxDrop);
  for (const r of seq.passed) Object.assign(certOf.get(r)!.pt.cert!, { tested: true, passed: true });
  if (seq.failed) certOf.get(seq.failed)!.pt.cert!.tested = true;

  const robust = o.robust ?? true;
  const ok = (r: Rec): boolean => {
    const x = certOf.get(r)!;
    const nth = nudge(r, x.s.cands);
    if (!nth) return true;
    const nb = observed(countsAt(x.sp, x.xsp, nth, r.cap, form)) * 100;
    x.pt.cert!.nudged = nb;
    return !robust || nb <= maxDrop;
  };
  const eligible = seq.passed.filter(ok);
  let chosen: Point = full, chosenCost = Infinity;
  const kindCost = kinds.map(() => Infinity);
  for (const r of eligible) {
    const x = certOf.get(r)!, ki = searched.indexOf(x.s);
    if (x.heldCost < Math.min(chosenCost, full.held.meanMacs)) { chosen = x.pt; chosenCost = x.heldCost; }
    if (x.heldCost < Math.min(kindCost[ki], full.held.meanMacs)) { kinds[ki].chosen = x.pt; kindCost[ki] = x.heldCost; }
  }

  const chosenRec = eligible.find((r) => certOf.get(r)!.pt === chosen);
  const cb = chosenRec && certOf.get(chosenRec)!;
  const failed = seq.failed && certOf.get(seq.failed)!;
  const neededOf = (x: NonNullable<typeof failed>) => rowsNeeded(x.counts, maxDrop / 100, delta);
  const next = failed && { policy: failed.pt.policy, estimate: failed.b.estimate * 100, bound: failed.b.bound * 100, needed: neededOf(failed) };
  const method = cb ? cb.b.method : form ?? (c.labelled ? 'paired' : 'disagreement');
  const usesUnlabelled = !!extraP && method !== 'paired';
  const guarantee: Guarantee = recordedGuarantee({
    confidence, maxDrop, certified: !!cb, unit: 'samples', evidence: heldP.n, unlabelled: usesUnlabelled ? extraP!.n : 0,
    estimate: cb ? cb.b.estimate * 100 : 0, bound: cb ? cb.b.bound * 100 : 0,
    method: `${mixed && method === 'disagreement' ? `disagreement with the full model on ${c.labelled ? 'labelled and ' : ''}unlabelled rows (Clopper–Pearson)` : METHOD[method]}; fixed-sequence testing over ${ordered.length} front settings (Learn-then-Test)`,
    margin: maxDrop - (cb ? cb.b.bound * 100 : 0), tested: seq.passed.length + (seq.failed ? 1 : 0), passed: seq.passed.length,
    ...(next?.needed !== undefined ? { needed: next.needed } : {}),
    ...(next ? { next } : {}),
    ...(cb?.pt.cert?.nudged !== undefined ? { nudged: cb.pt.cert.nudged } : {}),
    assumes: [
      'new data comes from the same source as the tuning data, each sample an independent draw (for recordings in time order, tune with --stream)',
      c.labelled ? 'the labels are right' : 'accuracy is agreement with the full model; the bound on disagreement also bounds the drop in accuracy against true labels',
      ...(mixed && c.labelled && method === 'disagreement' ? ['accuracy is bounded through disagreement with the full model, which bounds the drop against true labels too'] : []),
      ...(usesUnlabelled ? [`the unlabelled rows come from the same source and were not used for anything else${mixed ? ' (half of them search, the other half certify)' : ''}`] : []),
    ],
  });
  return {
    labelled: c.labelled, maxDrop, split: { mode: 'interleave', heldOut, tune: tuneP.n, held: heldP.n },
    reach: [...reach], full, kinds, chosen, settings, guarantee,
  };
}

/** The cache with the full model's answers as labels. */
function asUnlabelled(c: ExitCache): ExitCache {
  const E1 = c.exits + 1, labels = new Int32Array(c.samples);
  for (let i = 0; i < c.samples; i++) labels[i] = argmax(c.logits, (i * E1 + c.exits) * c.classes, c.classes);
  return { ...c, labels, labelled: false };
}

/** Two caches of the same exits and classes, rows of the first then the second (labels as each gives them). */
function concatRows(a: ExitCache, b: ExitCache): ExitCache {
  const logits = new Float32Array(a.logits.length + b.logits.length);
  logits.set(a.logits); logits.set(b.logits, a.logits.length);
  const labels = new Int32Array(a.samples + b.samples);
  labels.set(a.labels); labels.set(b.labels, a.samples);
  return { ...a, samples: a.samples + b.samples, logits, labels };
}

/**
 * What certification would choose, judged from one part alone: the same search and fixed sequence, with
 * each setting's rates on this part carried over to `rows` certification rows. Build uses it to compare exit
 * placements on the search part, so the certification part stays unseen until the final tuning.
 */
export function forecast(c: ExitCache, costs: ExitCosts, o: TuneOptions & { rows: number }): { policy: FramePolicy; meanMacs: number; accuracy: number } {
  const maxDrop = o.maxDrop ?? 1, delta = 1 - (o.confidence ?? 0.95), E = c.exits;
  const reach = reachOf(costs, E);
  const part = preparePart(c, Int32Array.from({ length: c.samples }, (_, i) => i));
  const risk = riskOn(part, delta);
  const searched = search(c, part, reach, o.kinds ?? TUNE_KINDS, o.grid ?? 32, o.budgetScore ?? 'confidence', risk);
  const kindOfRec = new Map<Rec, Searched>();
  for (const s of searched) for (const r of s.front) kindOfRec.set(r, s);
  const fullCost = reach[E] * part.n;
  const ordered = riskFront(searched.flatMap((s) => s.front), risk).reverse().filter((r) => !isFull(r, E) && r.cost < fullCost);
  const scale = o.rows / Math.max(part.n, 1), sc = (x: number) => Math.min(Math.round(x * scale), o.rows);
  const bound = boundMemo(delta);
  const seq = fixedSequence(ordered, (r) => {
    const s = kindOfRec.get(r)!;
    const d = discordant(s.sp.table, part, r.th, r.cap);
    const counts = countsOf(c.labelled, o.rows, { lost: sc(d.lost), gained: sc(d.gained), disagree: sc(d.disagree) });
    return bound(counts).bound * 100 <= maxDrop;
  });
  const best = seq.passed.at(-1);
  if (!best) return { policy: fullModel(E), meanMacs: reach[E], accuracy: part.n ? part.fullCorrect / part.n : 0 };
  return { policy: kindOfRec.get(best)!.k.policy(best, reach, E, c.classes), meanMacs: best.cost / part.n, accuracy: best.correct / part.n };
}

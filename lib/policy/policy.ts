// Exit policies as serialisable descriptions (they go into the manifest) and
// the per-sample walk down the exits. Exits are numbered 0 … E−1 (the heads);
// index E is the model's final output, where every walk ends at the latest.
// A threshold of null means "no decision at this exit": nothing computed, no stop.
import { OfframpError } from '../errors.js';
import { argmax, confidence, entropy, margin } from './scores.js';
import { DISTANCES, type DistanceKind } from './distance.js';
import { patienceOps, scoreDecisionOps, units } from './overhead.js';
import { f32 } from './f32.js';

export type ScoreKind = 'confidence' | 'entropy' | 'margin';
export const SCORES: readonly ScoreKind[] = ['confidence', 'entropy', 'margin'];

/** Stop at exit k when score ≥ τₖ (confidence, margin) or normalised entropy ≤ τₖ. */
export interface ScorePolicy { kind: ScoreKind; thresholds: (number | null)[] }
/** Stop when the predicted class has been the same at the last `patience` exits (Zhou et al. 2020's t is patience − 1). */
export interface PatiencePolicy { kind: 'patience'; thresholds: []; patience: number }
/** A hard per-sample budget in MAC-equivalents: stop at the deepest exit whose worst-case cost fits, earlier if `score` says so. */
export interface BudgetPolicy { kind: 'budget'; thresholds: (number | null)[]; budget: number; score?: ScoreKind }
export type FramePolicy = ScorePolicy | PatiencePolicy | BudgetPolicy;
/**
 * Stream policies (frames in temporal order). `difference` compares at exit `exit`; `agreeing` at the
 * shallowest exit that agreed with the scene's result. Reuse the scene's result when the distance is
 * below thresholds[0]; otherwise run on from the compared exit with `then` (default: to the final output).
 * `refresh` R: at least one frame in any R in a row runs on to the final output (and opens a scene), so a
 * scene change the distance misses costs at most R − 1 frames; absent: no refresh.
 */
export interface StreamPolicy { kind: 'difference' | 'agreeing'; thresholds: [number]; distance: DistanceKind; exit?: number; then?: FramePolicy; refresh?: number }
export type Policy = FramePolicy | StreamPolicy;
export type PolicyKind = Policy['kind'];
export const FRAME_KINDS: readonly FramePolicy['kind'][] = ['confidence', 'entropy', 'margin', 'patience', 'budget'];
export const STREAM_KINDS: readonly StreamPolicy['kind'][] = ['difference', 'agreeing'];

export const isStream = (p: Policy): p is StreamPolicy => p.kind === 'difference' || p.kind === 'agreeing';
/** The full model as a policy: no decision anywhere. */
export const fullModel = (exits: number): ScorePolicy => ({ kind: 'confidence', thresholds: new Array(exits).fill(null) });

/** Check a policy read from JSON against a chain of `exits` early exits. */
export function checkPolicy(v: unknown, exits: number, where = 'policy'): Policy {
  const bad = (msg: string) => new OfframpError('data', msg, undefined, where);
  if (!v || typeof v !== 'object') throw bad('not an object');
  const p = v as Record<string, unknown>;
  const th = p.thresholds;
  if (!Array.isArray(th) || !th.every((t) => t === null || (typeof t === 'number' && Number.isFinite(t)))) throw bad('thresholds must be a list of numbers or nulls');
  const perExit = () => { if (th.length !== exits) throw bad(`${p.kind} needs ${exits} thresholds (one per exit), got ${th.length}`); };
  switch (p.kind) {
    case 'confidence': case 'entropy': case 'margin': perExit(); break;
    case 'patience':
      if (th.length) throw bad('patience takes no thresholds');
      if (!Number.isInteger(p.patience) || (p.patience as number) < 1) throw bad('patience must be a whole number ≥ 1');
      break;
    case 'budget':
      if (typeof p.budget !== 'number' || !(p.budget >= 0)) throw bad('budget must be a number of MACs ≥ 0');
      if (p.score === undefined) { if (th.length) throw bad('a budget without score takes no thresholds'); }
      else if (!SCORES.includes(p.score as ScoreKind)) throw bad(`unknown score '${p.score}'`);
      else perExit();
      break;
    case 'difference': case 'agreeing':
      if (th.length !== 1 || th[0] === null) throw bad(`${p.kind} takes one distance threshold`);
      if (!DISTANCES.includes(p.distance as DistanceKind)) throw bad(`distance must be one of ${DISTANCES.join(', ')}`);
      if (p.kind === 'difference' && (!Number.isInteger(p.exit) || (p.exit as number) < 0 || (p.exit as number) > exits)) throw bad(`difference needs an exit in 0…${exits}`);
      if (p.refresh !== undefined && !(Number.isInteger(p.refresh) && (p.refresh as number) >= 1 && (p.refresh as number) <= 0x7fffffff)) throw bad('refresh must be a whole number of frames ≥ 1');
      if (p.then !== undefined) {
        const t = checkPolicy(p.then, exits, `${where}.then`);
        if (isStream(t)) throw bad('then must be a per-frame policy');
      }
      break;
    default: throw bad(`unknown policy kind '${String(p.kind)}'`);
  }
  return v as Policy;
}

/** What a walk needs besides the logits: the shape of the chain and, for budgets, the deepest exit allowed. */
export interface Chain { exits: number; classes: number; cap: number }
export const chain = (exits: number, classes: number, cap = exits): Chain => ({ exits, classes, cap });

/** Exit outputs on demand: logits of exit k (k = exits: the final output), `classes` values from `offset(k)`. */
export interface ExitView {
  data(k: number): ArrayLike<number>;
  offset(k: number): number;
  /** Optional: exit k's softmax as `softmax` computes it, `classes` values from `offset(k)` as the logits are, for a caller that keeps them (the stream tuner). */
  probs?(k: number): ArrayLike<number>;
}

/** Patience's memory across the exits of one sample. */
export interface FrameState { last: number; run: number }
export const frameStart = (): FrameState => ({ last: -1, run: 0 });

/** The score a score policy compares, oriented so that "stop" is always score ≥ threshold (entropy is negated). */
export function orientedScore(kind: ScoreKind, z: ArrayLike<number>, off: number, n: number): number {
  return kind === 'confidence' ? confidence(z, off, n) : kind === 'margin' ? margin(z, off, n) : -entropy(z, off, n);
}
/** Thresholds are compared as float32, as the C holds them (a tuned threshold is a float32 score already). */
export const orientedThreshold = (kind: ScoreKind, t: number | null): number => (t === null ? Infinity : kind === 'entropy' ? -f32(t) : f32(t));

const scoreOf = (p: FramePolicy): ScoreKind | undefined => (p.kind === 'patience' ? undefined : p.kind === 'budget' ? p.score : p.kind);

/** Decision overhead, MAC-equivalents, of deciding at exit k under p (0 where it makes no decision). */
export function decisionCost(p: FramePolicy, k: number, n: number): number {
  if (p.kind === 'patience') return units(patienceOps(n));
  const s = scoreOf(p);
  return s && p.thresholds[k] !== null && p.thresholds[k] !== undefined ? units(scoreDecisionOps(s, n)) : 0;
}

/** Decide at exit k (< c.exits): stop here? Patience updates `s`. */
export function decide(p: FramePolicy, s: FrameState, k: number, z: ArrayLike<number>, off: number, c: Chain): boolean {
  if (k >= c.cap) return true;
  if (p.kind === 'patience') {
    const l = argmax(z, off, c.classes);
    s.run = l === s.last ? s.run + 1 : 1;
    s.last = l;
    return s.run >= p.patience;
  }
  const kind = scoreOf(p);
  const t = p.thresholds[k];
  if (!kind || t === null || t === undefined) return false;
  return orientedScore(kind, z, off, c.classes) >= orientedThreshold(kind, t);
}

export interface FrameResult { exit: number; label: number; overhead: number }

/** One sample's walk from exit `from`: the exit it stops at, its label, the decision overhead spent. */
export function runFrame(p: FramePolicy, c: Chain, v: ExitView, from = 0): FrameResult {
  const s = frameStart();
  let overhead = 0;
  let k = from;
  for (; k < c.exits; k++) {
    if (k >= c.cap) break;
    overhead += decisionCost(p, k, c.classes);
    if (decide(p, s, k, v.data(k), v.offset(k), c)) break;
  }
  return { exit: k, label: argmax(v.data(k), v.offset(k), c.classes), overhead };
}

/**
 * Worst-case cost of stopping at each exit k under p: reach[k] plus the decisions made before k.
 * `reach[k]` is what it takes to have exit k's output (stages and heads up to it).
 */
export function worstCase(p: FramePolicy, reach: ArrayLike<number>, exits: number, n: number): Float64Array {
  const w = new Float64Array(exits + 1);
  let d = 0;
  for (let k = 0; k <= exits; k++) { w[k] = reach[k] + d; if (k < exits) d += decisionCost(p, k, n); }
  return w;
}

/** The deepest exit whose worst-case cost fits the budget; 0 when none does (the least the chain can do). */
export function budgetCap(budget: number, worst: ArrayLike<number>): number {
  let cap = 0;
  for (let k = 0; k < worst.length; k++) if (worst[k] <= budget) cap = k;
  return cap;
}

/** The Chain a frame policy runs with: budgets get their cap from the exits' worst-case costs. */
export function chainFor(p: FramePolicy, reach: ArrayLike<number>, exits: number, classes: number): Chain {
  return chain(exits, classes, p.kind === 'budget' ? budgetCap(p.budget, worstCase(p, reach, exits, classes)) : exits);
}

// Fast evaluation of a per-frame setting on a part of the cache. Scores are
// computed once per policy kind (the same functions the runner calls, so the
// decisions are identical); a setting is then a pass over numbers:
// walk k while score < threshold, count the exit and whether it was right.
import { argmax, decisionCost, orientedScore, type FramePolicy, type ScoreKind } from '../policy/index.js';
import type { ExitCache } from './cache.js';

/** A part of the cache (tune or held-out), with per-exit correctness precomputed. */
export interface Part {
  idx: Int32Array;
  n: number;
  exits: number;
  /** [n × (exits+1)]: 1 where exit k's argmax equals the label */
  correct: Uint8Array;
  /** correct answers of the final output */
  fullCorrect: number;
  /** [n × (exits+1)]: 1 where exit k's argmax equals the final output's (the disagreement term of a bound) */
  agree: Uint8Array;
  /** [n × (exits+1)]: bit 0 correct, bit 1 lost (the final output right, exit k wrong): what the hot loop reads */
  flags: Uint8Array;
}

export function preparePart(c: ExitCache, idx: Int32Array): Part {
  const E1 = c.exits + 1, C = c.classes;
  const correct = new Uint8Array(idx.length * E1), agree = new Uint8Array(idx.length * E1);
  let full = 0;
  for (let j = 0; j < idx.length; j++) {
    const i = idx[j];
    const last = argmax(c.logits, (i * E1 + c.exits) * C, C);
    for (let k = 0; k < E1; k++) {
      const l = argmax(c.logits, (i * E1 + k) * C, C);
      correct[j * E1 + k] = l === c.labels[i] ? 1 : 0;
      agree[j * E1 + k] = l === last ? 1 : 0;
    }
    full += correct[j * E1 + c.exits];
  }
  const flags = new Uint8Array(idx.length * E1);
  for (let j = 0; j < idx.length; j++) {
    const f = correct[j * E1 + c.exits];
    for (let k = 0; k < E1; k++) flags[j * E1 + k] = correct[j * E1 + k] | ((f & (correct[j * E1 + k] ^ 1)) << 1);
  }
  return { idx, n: idx.length, exits: c.exits, correct, fullCorrect: full, agree, flags };
}

/**
 * Per-sample per-exit numbers a setting compares with its thresholds: stop at exit k when s[j·stride + k] ≥ th[k].
 * Rows are padded to 4 exits (with −∞, never stopping) so chains of up to 4 exits run the unrolled kernel.
 */
export interface Table { s: Float64Array; stride: number }
const strideFor = (E: number) => (E <= 4 ? 4 : E);

/** Oriented scores of a score kind (the runner's own functions, so decisions are identical). */
export function scoreTable(c: ExitCache, p: Part, kind: ScoreKind): Table {
  const E = c.exits, E1 = E + 1, C = c.classes, W = strideFor(E);
  const s = new Float64Array(p.n * W).fill(-Infinity);
  for (let j = 0; j < p.n; j++) for (let k = 0; k < E; k++) s[j * W + k] = orientedScore(kind, c.logits, (p.idx[j] * E1 + k) * C, C);
  return { s, stride: W };
}

/** Run length of the predicted class ending at exit k: patience p stops at the first k where it is ≥ p. */
export function patienceTable(c: ExitCache, p: Part): Table {
  const E = c.exits, E1 = E + 1, C = c.classes, W = strideFor(E);
  const s = new Float64Array(p.n * W).fill(-Infinity);
  for (let j = 0; j < p.n; j++) {
    let last = -1, run = 0;
    for (let k = 0; k < E; k++) {
      const l = argmax(c.logits, (p.idx[j] * E1 + k) * C, C);
      run = l === last ? run + 1 : 1;
      last = l;
      s[j * W + k] = run;
    }
  }
  return { s, stride: W };
}

/**
 * Cost of stopping at each exit under a setting: reach[k], the decisions made at exits before k, and the one
 * at k itself unless k is the cap or the final output (where the walk stops without deciding). Mirrors runFrame.
 */
export function exitCosts(p: FramePolicy, reach: ArrayLike<number>, exits: number, classes: number, cap: number, out = new Float64Array(exits + 1)): Float64Array {
  let d = 0;
  for (let k = 0; k <= exits; k++) {
    const here = k < exits && k < cap ? decisionCost(p, k, classes) : 0;
    out[k] = reach[k] + d + here;
    d += here;
  }
  return out;
}

export interface Tally { correct: number; cost: number; /** rows the full model gets right and the setting wrong */ lost: number }

/**
 * The hot loop: one setting (oriented thresholds th, cap) over a part; fills hist[0..exits]. The exit is the
 * lowest set bit of a mask of "stops here" flags (the cap's bit always set), computed without branches: the
 * walk's data-dependent early break mispredicts too often to be the fast form. Same answer as the walk.
 */
export function tally(t: Table, p: Part, th: Float64Array, cap: number, cost: Float64Array, hist: Int32Array): Tally {
  const E = p.exits, E1 = E + 1, n = p.n, fl = p.flags, s = t.s, W = t.stride;
  hist.fill(0);
  let correct = 0, lost = 0;
  const stop = E < 30 ? 1 << cap : 0;
  if (W === 4) {
    const t0 = E > 0 ? th[0] : Infinity, t1 = E > 1 ? th[1] : Infinity, t2 = E > 2 ? th[2] : Infinity, t3 = E > 3 ? th[3] : Infinity;
    for (let j = 0, b = 0, cb = 0; j < n; j++, b += 4, cb += E1) {
      const m = stop | +(s[b] >= t0) | (+(s[b + 1] >= t1) << 1) | (+(s[b + 2] >= t2) << 2) | (+(s[b + 3] >= t3) << 3);
      const k = 31 - Math.clz32(m & -m);
      hist[k]++;
      const f = fl[cb + k];
      correct += f & 1;
      lost += f >> 1;
    }
  } else if (E < 30) {
    for (let j = 0, b = 0, cb = 0; j < n; j++, b += W, cb += E1) {
      let m = stop;
      for (let k = 0; k < E; k++) m |= +(s[b + k] >= th[k]) << k;
      const k = 31 - Math.clz32(m & -m);
      hist[k]++;
      const f = fl[cb + k];
      correct += f & 1;
      lost += f >> 1;
    }
  } else {
    // more exits than mask bits: the plain walk
    for (let j = 0, b = 0, cb = 0; j < n; j++, b += W, cb += E1) {
      let k = 0;
      while (k < cap && !(s[b + k] >= th[k])) k++;
      hist[k]++;
      const f = fl[cb + k];
      correct += f & 1;
      lost += f >> 1;
    }
  }
  let total = 0;
  for (let k = 0; k <= E; k++) total += hist[k] * cost[k];
  return { correct, cost: total, lost };
}

/** What a drop bound counts for one setting on a part: the rows it loses and gains against the full model, and where it disagrees. */
export interface Discordant { lost: number; gained: number; disagree: number }

/** The plain walk (certification runs on front points only, so clarity beats the mask kernel here). */
export function discordant(t: Table, p: Part, th: Float64Array, cap: number): Discordant {
  const E1 = p.exits + 1, s = t.s, W = t.stride, corr = p.correct, agr = p.agree;
  let lost = 0, gained = 0, disagree = 0;
  for (let j = 0, b = 0, cb = 0; j < p.n; j++, b += W, cb += E1) {
    let k = 0;
    while (k < cap && !(s[b + k] >= th[k])) k++;
    const full = corr[cb + p.exits], mine = corr[cb + k];
    lost += full & (mine ^ 1);
    gained += (full ^ 1) & mine;
    disagree += agr[cb + k] ^ 1;
  }
  return { lost, gained, disagree };
}

// Stream tuning: the difference and agreeing policies over an ordered sequence.
// A setting's evaluation walks the frames in order through streamStep, the same
// state machine a runner or a firmware port uses, so scene state carries over
// exactly. The split keeps time order: tune on the head, report on the tail.
import { OfframpError } from '../errors.js';
import { chainFor, DISTANCES, distance, fullModel, isStream, runFrame, softmax, streamStart, streamStep, type DistanceKind, type FramePolicy, type StreamPolicy } from '../policy/index.js';
import { reachOf, splitParts, viewOf, type ExitCache, type ExitCosts } from './cache.js';
import { evalOf, front, type Eval, type KindResult, type Point, type TuneResult } from './search.js';

export interface StreamEval extends Eval { scenes: number; reused: number }

export interface StreamTuneOptions {
  maxDrop?: number;
  heldOut?: number;
  /** distance-threshold candidates per exit (default 24) */
  grid?: number;
  distances?: readonly DistanceKind[];
  kinds?: readonly StreamPolicy['kind'][];
  /** per-frame policies to run on a scene change (the full model is always tried) */
  then?: FramePolicy[];
}

/** Run a stream policy over frames idx (in order) of the cache. */
export function evalStream(c: ExitCache, idx: Int32Array, p: StreamPolicy | FramePolicy, reach: Float64Array): StreamEval & { correct: number; cost: number } {
  const E = c.exits, C = c.classes;
  const hist = new Int32Array(E + 1);
  let correct = 0, cost = 0, reused = 0, scenes = 0;
  if (!isStream(p)) {
    const ch = chainFor(p, reach, E, C);
    // a per-frame policy on the same frames, for comparison: every frame its own scene
    for (const i of idx) {
      const r = runFrame(p, ch, viewOf(c, i));
      hist[r.exit]++; cost += reach[r.exit] + r.overhead; correct += r.label === c.labels[i] ? 1 : 0;
    }
    scenes = idx.length;
  } else {
    const ch = chainFor(p.then ?? fullModel(E), reach, E, C);
    const s = streamStart(C);
    for (const i of idx) {
      const r = streamStep(p, s, viewOf(c, i), ch);
      hist[r.exit]++; cost += reach[r.exit] + r.overhead; correct += r.label === c.labels[i] ? 1 : 0;
      if (r.reused) reused++;
    }
    scenes = s.scene + 1;
  }
  return { ...evalOf({ correct, cost, hist }, idx.length), scenes, reused, correct, cost };
}

/** Distance-threshold candidates: quantiles of the distances between consecutive frames' softmax at the exits given. */
function taus(c: ExitCache, idx: Int32Array, kind: DistanceKind, exits: number[], grid: number): number[] {
  const C = c.classes, E1 = c.exits + 1;
  const a = new Float64Array(C), b = new Float64Array(C);
  const ds: number[] = [];
  for (const k of exits) for (let j = 1; j < idx.length; j++) {
    softmax(c.logits, (idx[j - 1] * E1 + k) * C, C, a);
    softmax(c.logits, (idx[j] * E1 + k) * C, C, b);
    const d = distance(kind, a, b, C);
    if (Number.isFinite(d)) ds.push(d);
  }
  ds.sort((x, y) => x - y);
  const out = new Set<number>();
  // just above a quantile, so "d < τ" reuses the frames at that quantile too
  for (let g = 1; g <= grid && ds.length; g++) { const v = ds[Math.round((g / grid) * (ds.length - 1))]; out.add(v > 0 ? v * (1 + 1e-9) : Number.MIN_VALUE); }
  return [...out].sort((x, y) => x - y);
}

export function tuneStream(c: ExitCache, costs: ExitCosts, o: StreamTuneOptions = {}): TuneResult<StreamPolicy> {
  const maxDrop = o.maxDrop ?? 1, heldOut = o.heldOut ?? 0.5, grid = o.grid ?? 24, E = c.exits;
  if (!(maxDrop >= 0)) throw new OfframpError('usage', `--max-drop must be ≥ 0 percentage points, not ${maxDrop}`);
  if (c.samples < 4) throw new OfframpError('data', 'stream tuning needs at least 4 frames');
  const reach = reachOf(costs, E);
  const parts = splitParts(c.samples, heldOut, 'tail');
  const fullPolicy = fullModel(E);
  const tuneFull = evalStream(c, parts.tune, fullPolicy, reach), heldFull = evalStream(c, parts.held, fullPolicy, reach);
  const strip = (e: StreamEval & { correct: number; cost: number }): StreamEval => ({ samples: e.samples, accuracy: e.accuracy, meanMacs: e.meanMacs, exitShare: e.exitShare, scenes: e.scenes, reused: e.reused });
  const full: Point<FramePolicy> = { policy: fullPolicy, tune: strip(tuneFull), held: strip(heldFull) };
  const fits = (e: { correct: number }, f: { correct: number }, n: number) => (f.correct - e.correct) * 100 <= maxDrop * n;
  const thens: (FramePolicy | undefined)[] = [undefined, ...(o.then ?? [])];
  let settings = 0;
  const kinds: KindResult<StreamPolicy>[] = [];
  for (const kind of o.kinds ?? (['difference', 'agreeing'] as const)) {
    const recs: { policy: StreamPolicy; correct: number; cost: number; e: StreamEval }[] = [];
    for (const dist of o.distances ?? DISTANCES) {
      for (const exit of kind === 'difference' ? Array.from({ length: E }, (_, k) => k) : [-1]) {
        const ts = taus(c, parts.tune, dist, exit >= 0 ? [exit] : Array.from({ length: E }, (_, k) => k), grid);
        for (const then of thens) for (const t of ts) {
          const policy: StreamPolicy = kind === 'difference' ? { kind, thresholds: [t], distance: dist, exit } : { kind, thresholds: [t], distance: dist };
          if (then) policy.then = then;
          const e = evalStream(c, parts.tune, policy, reach);
          recs.push({ policy, correct: e.correct, cost: e.cost, e: strip(e) });
        }
      }
    }
    settings += recs.length;
    const points: Point<StreamPolicy>[] = [];
    let chosen: Point<StreamPolicy | FramePolicy> = full, chosenCost = full.held.meanMacs;
    for (const r of front(recs)) {
      const h = evalStream(c, parts.held, r.policy, reach);
      const pt: Point<StreamPolicy> = { policy: r.policy, tune: r.e, held: strip(h) };
      points.push(pt);
      if (fits(r, tuneFull, parts.tune.length) && fits(h, heldFull, parts.held.length) && pt.held.meanMacs < chosenCost) { chosen = pt; chosenCost = pt.held.meanMacs; }
    }
    kinds.push({ kind, evaluated: recs.length, front: points, chosen: chosen as Point<StreamPolicy> });
  }
  let chosen: Point<StreamPolicy | FramePolicy> = full;
  for (const r of kinds) if (r.chosen.held.meanMacs < chosen.held.meanMacs) chosen = r.chosen;
  return { labelled: c.labelled, maxDrop, split: { mode: 'tail', heldOut, tune: parts.tune.length, held: parts.held.length }, reach: [...reach], full, kinds, chosen, settings };
}

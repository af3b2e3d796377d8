// Replay: frames in order through the staged runner under a policy. The
// runner asks after each exit whether to stop; the answer comes from the same
// pieces of lib/policy that streamStep and runFrame are made of, in the same
// order, so a replay spends exactly what the tuner's simulation predicted.
import { roundNoise } from '../util/json.js';
import { OfframpError } from '../errors.js';
import {
  argmax, chainFor, compareExit, decide, decisionCost, frameStart, fullModel, isStream, refreshDue, streamOpen, streamStart, streamTest,
  type FramePolicy, type Policy,
} from '../policy/index.js';
import type { Chain } from '../run/chain.js';
import { reachOf } from './cache.js';
import { frames, type ChainLayout } from './chain-capture.js';
import type { Guarantee } from './guarantee.js';

export interface ReplayFrame { frame: number; exit: number; exitName: string; macs: number; label: number; scene: number; reused: boolean; truth?: number }
export interface ReplaySummary {
  frames: number; accuracy?: number; meanMacs: number; fullMacs: number; saving: number;
  exitShare: number[]; scenes: number; reusedShare: number;
  /** with labels: the full model's accuracy on the same frames, and the drop observed (percentage points) */
  fullAccuracy?: number; drop?: number;
  /** with labels and a certified policy in the manifest: the promise, and whether these frames kept it */
  promise?: { maxDrop: number; confidence: number; bound: number; kept: boolean };
}

/** The observed drop against the full model on the replayed frames, set beside the manifest's promise. */
export function withDrop(s: ReplaySummary, fullAccuracy: number, g?: Guarantee): ReplaySummary {
  if (s.accuracy === undefined) return s;
  const drop = roundNoise((fullAccuracy - s.accuracy) * 100);
  return { ...s, fullAccuracy, drop, ...(g && g.certified ? { promise: { maxDrop: g.maxDrop, confidence: g.confidence, bound: g.bound, kept: drop <= g.maxDrop } } : {}) };
}
export interface ReplayResult { policy: Policy; exits: string[]; frames: ReplayFrame[]; summary: ReplaySummary }

/** Frames of `data` (.npy, in order) through the chain under `policy`, as firmware would run them: per-frame exits, MACs and, with labels, accuracy. */
export async function replay(chain: Chain, layout: ChainLayout, policy: Policy, data: string, o: { labels?: Int32Array; recordings?: Int32Array } = {}): Promise<ReplayResult> {
  const E = layout.exits.length, C = layout.classes;
  const reach = reachOf(layout.costs, E);
  const index = new Map(layout.exits.map((n, i) => [n, i]));
  const stream = isStream(policy) ? policy : undefined;
  const frame: FramePolicy = stream ? stream.then ?? fullModel(E) : (policy as FramePolicy);
  const ch = chainFor(frame, reach, E, C);
  const rows: ReplayFrame[] = [];
  let s = streamStart(C), sceneBase = 0, i = 0;
  for (const x of frames(chain.manifest, data)) {
    // a new recording is a new stream: nothing carries over from the last one
    if (o.recordings && i > 0 && o.recordings[i] !== o.recordings[i - 1]) { sceneBase += s.scene + 1; s = streamStart(C); }
    const seen: Float32Array[] = new Array(E + 1);
    const fs = frameStart();
    const k0 = stream ? compareExit(stream, s) : -1, from = Math.max(k0, 0);
    // a refresh runs this frame on to the final output, untested
    const forced = stream ? refreshDue(stream, s) : false;
    let overhead = 0, reused = false, tested = false;
    const at = (k: number, z: Float32Array): boolean => {
      seen[k] = z;
      if (stream && s.scene >= 0 && k === k0 && !forced) {
        const t = streamTest(stream, s, z, 0, ch);
        overhead += t.overhead;
        if (t.reuse) { reused = true; return true; }
        tested = true;
      }
      if (forced || k < from || k >= E) return false;
      if (k >= ch.cap) return true;
      overhead += decisionCost(frame, k, C);
      return decide(frame, fs, k, z, 0, ch);
    };
    const logits = (name: string, t: { type: string; size: number; data: unknown } | undefined) => {
      if (!t || t.type !== 'float32' || t.size !== C) throw new OfframpError('runtime', `output '${name}' is not float32 with ${C} values`, chain.dir, `frame ${i}`);
      return t.data as Float32Array;
    };
    const r = await chain.run({ [layout.input]: x }, { policy: (e) => at(index.get(e.name)!, logits(e.name, e.value)) });
    let stop = r.exit === null ? E : index.get(r.exit)!;
    if (r.exit === null) at(E, logits(layout.final, r.outputs[layout.final]));
    let label: number, scene: number;
    if (reused) { label = s.label; scene = sceneBase + s.scene; stop = k0; }
    else {
      label = argmax(seen[stop], 0, C);
      if (stream) overhead += streamOpen(stream, s, { data: (k) => seen[k], offset: () => 0 }, stop, label, ch, tested);
      scene = stream ? sceneBase + s.scene : i;
    }
    rows.push({ frame: i, exit: stop, exitName: stop === E ? layout.final : layout.exits[stop], macs: r.macs + overhead, label, scene, reused, ...(o.labels ? { truth: o.labels[i] } : {}) });
    i++;
  }
  if (o.labels && o.labels.length !== rows.length) throw new OfframpError('data', `${o.labels.length} labels for ${rows.length} frames`);
  if (o.recordings && o.recordings.length !== rows.length) throw new OfframpError('data', `${o.recordings.length} recording ids for ${rows.length} frames`);
  const n = rows.length;
  const hist = new Array(E + 1).fill(0);
  let macs = 0, right = 0, reusedN = 0;
  for (const f of rows) { hist[f.exit]++; macs += f.macs; if (f.truth === f.label) right++; if (f.reused) reusedN++; }
  const fullMacs = reach[E], meanMacs = n ? macs / n : 0;
  const summary: ReplaySummary = {
    frames: n, ...(o.labels ? { accuracy: n ? right / n : 0 } : {}), meanMacs, fullMacs, saving: fullMacs ? 1 - meanMacs / fullMacs : 0,
    exitShare: hist.map((h) => (n ? h / n : 0)), scenes: n ? rows[n - 1].scene + 1 : 0, reusedShare: n ? reusedN / n : 0,
  };
  return { policy, exits: [...layout.exits, layout.final], frames: rows, summary };
}

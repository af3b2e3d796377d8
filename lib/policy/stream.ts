// Stream policies as explicit state machines: one StreamState per stream, one
// step per frame, so a firmware port keeps the same scene state between frames.
// A step is split into compareExit → test → (runFrame from there) → open, so a
// runner that executes stages one at a time can drive the same logic; streamStep
// composes them for callers that have every exit output at hand.
import { argmax, softmax } from './scores.js';
import { distance } from './distance.js';
import { f32 } from './f32.js';
import { argmaxOps, compareOps, softmaxOps, units } from './overhead.js';
import { fullModel, runFrame, type Chain, type ExitView, type FramePolicy, type StreamPolicy } from './policy.js';

export interface StreamState {
  /** scene number, −1 before the first frame */
  scene: number;
  /** exit the scene compares at */
  exit: number;
  /** the scene's result, reused while frames stay close */
  label: number;
  /** softmax at `exit` of the frame that opened the scene */
  ref: Float32Array;
  /** softmax of the frame under test (scratch, swapped into ref on open) */
  probs: Float32Array;
  /** frames since the last one that reached the final output (the refresh counts them) */
  age: number;
}
export const streamStart = (classes: number): StreamState => ({ scene: -1, exit: -1, label: -1, ref: new Float32Array(classes), probs: new Float32Array(classes), age: 0 });

/** A refresh is due: R − 1 frames in a row stopped short of the final output, so this one runs on to it, untested. */
export const refreshDue = (p: StreamPolicy, s: StreamState): boolean => p.refresh !== undefined && s.scene >= 0 && s.age >= p.refresh - 1;

/** The age after a frame that stopped at exit `k`. */
const aged = (s: StreamState, k: number, c: Chain): number => (k >= c.exits ? 0 : s.age + 1);

/** The exit to run the frame to before anything is decided: the scene's exit; without a scene, difference's own exit, agreeing none (−1). */
export function compareExit(p: StreamPolicy, s: StreamState): number {
  return s.scene >= 0 ? s.exit : p.kind === 'difference' ? p.exit! : -1;
}

export interface StreamTest { reuse: boolean; distance: number; overhead: number }

/** Exit k's softmax into `out`: the view's own when it keeps them, else computed. */
function softmaxAt(v: ExitView, k: number, n: number, out: Float32Array): void {
  if (!v.probs) { softmax(v.data(k), v.offset(k), n, out); return; }
  const q = v.probs(k), off = v.offset(k);
  for (let i = 0; i < n; i++) out[i] = q[off + i];
}

/**
 * Compare the frame's output at the scene's exit with the reference. Needs a scene; a reuse ages it.
 * `pre`: that output's softmax (from `off`, as z) when the caller has it (as `softmax` computes it), else computed from z.
 */
export function streamTest(p: StreamPolicy, s: StreamState, z: ArrayLike<number>, off: number, c: Chain, pre?: ArrayLike<number>): StreamTest {
  const n = c.classes;
  if (pre) for (let i = 0; i < n; i++) s.probs[i] = pre[off + i];
  else softmax(z, off, n, s.probs);
  const d = distance(p.distance, s.probs, s.ref, n);
  // agreeing: a change of label opens a scene even within the distance threshold
  const reuse = d < f32(p.thresholds[0]) && (p.kind !== 'agreeing' || argmax(s.probs, 0, n) === s.label);
  if (reuse) s.age = aged(s, s.exit, c);
  return { reuse, distance: d, overhead: units(compareOps(p.distance, n, p.kind === 'agreeing')) };
}

/**
 * Open a scene with this frame, whose walk stopped at `stop` with `label`. `tested` says whether
 * streamTest just ran at the exit the new scene keeps (its softmax is in s.probs already).
 * Returns the overhead spent.
 */
export function streamOpen(p: StreamPolicy, s: StreamState, v: ExitView, stop: number, label: number, c: Chain, tested: boolean): number {
  const n = c.classes;
  let overhead = 0;
  let k = p.exit ?? 0;
  if (p.kind === 'agreeing') {
    // the shallowest exit whose own prediction matches the result: the cheapest reliable comparison point
    k = 0;
    while (k < stop && argmax(v.data(k), v.offset(k), n) !== label) k++;
    overhead += (k + 1) * (units(argmaxOps(n)) + 1);
  }
  if (tested && k === s.exit) { const t = s.ref; s.ref = s.probs; s.probs = t; }
  else { softmaxAt(v, k, n, s.ref); overhead += units(softmaxOps(n)); }
  s.scene += 1;
  s.exit = k;
  s.label = label;
  s.age = aged(s, stop, c);
  return overhead;
}

export interface StreamResult { exit: number; label: number; reused: boolean; scene: number; overhead: number; distance: number }

/** One frame. `v` serves any exit the step asks for; the deepest asked for is `exit`. `c` is the chain for `then` (its budget cap). */
export function streamStep(p: StreamPolicy, s: StreamState, v: ExitView, c: Chain): StreamResult {
  const then: FramePolicy = p.then ?? fullModel(c.exits);
  const k = compareExit(p, s);
  let overhead = 0;
  let dist = NaN;
  let tested = false;
  const forced = refreshDue(p, s);
  if (s.scene >= 0 && !forced) {
    const t = streamTest(p, s, v.data(k), v.offset(k), c, v.probs?.(k));
    overhead += t.overhead;
    dist = t.distance;
    if (t.reuse) return { exit: k, label: s.label, reused: true, scene: s.scene, overhead, distance: dist };
    tested = true;
  }
  // a refresh runs on to the final output whatever `then` (a budget's cap included) would do
  const r = forced ? { exit: c.exits, label: argmax(v.data(c.exits), v.offset(c.exits), c.classes), overhead: 0 } : runFrame(then, c, v, Math.max(k, 0));
  overhead += r.overhead;
  // difference without a scene: the reference exit was run, so the walk ends no shallower than it
  const exit = Math.max(r.exit, k);
  overhead += streamOpen(p, s, v, r.exit, r.label, c, tested);
  return { exit, label: r.label, reused: false, scene: s.scene, overhead, distance: dist };
}

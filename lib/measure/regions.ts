// From the counter's log (instruction count at each marker store) to instructions per region.
//
// The log holds "E <event> <index> <count>" per marker, then "T <count>" (the run's total). Events
// come in begin/end pairs (harness/trace.c): 1/2 stage k, 3/4 decision on exit k, 5/6 frame, 7/8 the
// harness's empty calibration region, 9/10 kernel step k of the stage around it. Between two marker stores with nothing between, the marker
// itself executes `calibration` instructions (9 with the harness's call sequence), so a region's
// figure is its raw difference less one calibration per marker inside it and one for its own end:
//   net = (count_end - count_begin) - calibration × (1 + markers strictly inside).
// Regions nest (a frame holds stages and decisions) but must not overlap.
//
// Exact for code marked with the calibration's call sequence (two single-instruction argument
// moves, then bl). A compiled call site may set its arguments differently (an index already in r1:
// one instruction fewer; live values saved around the call: more), which the figure then includes,
// a few instructions per marker; a region that comes out below zero that way is reported as 0.
import { OfframpError } from '../errors.js';

export type RegionKind = 'stage' | 'decision' | 'frame' | 'step';

const KINDS: Record<number, RegionKind | 'calibration'> = { 1: 'stage', 3: 'decision', 5: 'frame', 7: 'calibration', 9: 'step' };

/** One executed region, in the order the regions ended. */
export interface Occurrence {
  kind: RegionKind;
  /** The firmware's index (stage k, exit k, frame number), its low 16 bits as the marker carries them. */
  index: number;
  /** Which frame it belongs to: the frame's position among the run's frames (0, 1, …); -1 outside any frame. */
  frame: number;
  instructions: number;
  /** A step's stage (the stage region around it); -1 outside any */
  stage?: number;
}

/** All occurrences of one stage or decision index, or of all frames together (index -1). */
export interface RegionSummary {
  kind: RegionKind;
  /** Stage k, exit k, step k; -1 for the frames, summed whatever their numbers. */
  index: number;
  /** a step's stage */
  stage?: number;
  count: number;
  total: number;
  min: number;
  max: number;
}

export interface CountLog {
  /** Instructions from reset to the exit call. */
  total: number;
  /** The marker's own cost between two stores, measured on the empty region. */
  calibration: number;
  occurrences: Occurrence[];
  regions: RegionSummary[];
  frames: number;
}

interface Open { kind: RegionKind | 'calibration'; event: number; index: number; start: number; inner: number; frame: number; stage: number }

/** The innermost open region of a kind. */
function innermost(open: Open[], kind: RegionKind): Open | undefined {
  for (let i = open.length - 1; i >= 0; i--) if (open[i]!.kind === kind) return open[i];
  return undefined;
}

const ORDER: RegionKind[] = ['stage', 'step', 'decision', 'frame'];

/** Read the counter's log. `complete`: the firmware ended normally, so every region must be closed. */
export function readCountLog(text: string, complete: boolean, file = 'counter log'): CountLog {
  if (typeof text !== 'string') throw new OfframpError('usage', 'text: the counter log as a string');
  if (typeof complete !== 'boolean') throw new OfframpError('usage', 'complete: true or false');
  const bad = (line: number, what: string) => new OfframpError('runtime', what, file, `line ${line}`);
  const open: Open[] = [];
  const occurrences: Occurrence[] = [];
  let calibration: number | undefined;
  let total: number | undefined;
  let frames = 0;
  const lines = text.split('\n');
  if (lines.at(-1) === '') lines.pop();
  lines.forEach((line, i) => {
    const n = i + 1;
    const f = line.split(' ');
    if (f[0] === 'X') throw bad(n, f.slice(1).join(' '));
    if (f[0] === 'T' && f.length === 2) { total = Number(f[1]); return; }
    if (f[0] !== 'E' || f.length !== 4) throw bad(n, `unreadable line ${JSON.stringify(line)}`);
    const [event, index, count] = f.slice(1).map(Number) as [number, number, number];
    if (!Number.isSafeInteger(count)) throw bad(n, `count ${f[3]} beyond exact range`);
    if (event % 2 === 1) {
      const kind = KINDS[event];
      if (!kind) throw bad(n, `unknown marker event ${event} (the firmware's are 1 to 6 and 9)`);
      if (kind === 'calibration' && (calibration !== undefined || open.length)) throw bad(n, 'calibration region not first');
      for (const o of open) o.inner++;
      const frame = kind === 'frame' ? frames++ : innermost(open, 'frame')?.frame ?? -1;
      open.push({ kind, event, index, start: count, inner: 0, frame, stage: innermost(open, 'stage')?.index ?? -1 });
      return;
    }
    const top = open.pop();
    if (!top || top.event !== event - 1 || top.index !== index) {
      const kind = KINDS[event - 1] ?? `event ${event}`;
      throw bad(n, top ? `end of ${kind} ${index} inside ${top.kind} ${top.index}` : `end of ${kind} ${index} without its begin`);
    }
    for (const o of open) o.inner++;
    const raw = count - top.start;
    if (top.kind === 'calibration') { calibration = raw; return; }
    if (calibration === undefined) throw bad(n, 'no calibration region before the firmware\'s markers');
    const instructions = Math.max(0, raw - calibration * (1 + top.inner));
    occurrences.push({ kind: top.kind, index, frame: top.frame, instructions, ...(top.kind === 'step' && { stage: top.stage }) });
  });
  if (total === undefined) throw new OfframpError('runtime', 'the counter wrote no total (QEMU stopped before its exit)', file);
  if (calibration === undefined) throw new OfframpError('runtime', 'no calibration region: the harness did not start', file);
  if (complete && open.length) {
    const o = open.at(-1)!;
    throw new OfframpError('runtime', `the firmware ended with ${o.kind} ${o.index} still open`, file);
  }
  const byKey = new Map<string, RegionSummary>();
  for (const o of occurrences) {
    const index = o.kind === 'frame' ? -1 : o.index;
    const key = `${o.kind} ${index} ${o.stage ?? ''}`;
    const s = byKey.get(key);
    if (!s) byKey.set(key, { kind: o.kind, index, ...(o.stage !== undefined && { stage: o.stage }), count: 1, total: o.instructions, min: o.instructions, max: o.instructions });
    else { s.count++; s.total += o.instructions; s.min = Math.min(s.min, o.instructions); s.max = Math.max(s.max, o.instructions); }
  }
  const regions = [...byKey.values()].sort((a, b) => ORDER.indexOf(a.kind) - ORDER.indexOf(b.kind) || (a.stage ?? 0) - (b.stage ?? 0) || a.index - b.index);
  return { total, calibration, occurrences, regions, frames };
}

/** One frame as it ran: its instructions (markers inside subtracted), and the stages and decisions
 *  it ran, in order, with their own figures. */
export interface FrameProfile {
  frame: number;
  index: number;
  instructions: number;
  stages: { index: number; instructions: number }[];
  decisions: { index: number; instructions: number }[];
  /** kernel steps, each with its stage */
  steps: { stage: number; index: number; instructions: number }[];
}

/** The frames of a run, each with what ran inside it; the exit path of a frame is its list of stages
 *  (and the last decision taken), so grouping these by path gives instructions per exit path. */
export function frameProfiles(occurrences: Occurrence[]): FrameProfile[] {
  if (!Array.isArray(occurrences)) throw new OfframpError('usage', 'occurrences: an array (Measurement.occurrences)');
  const frames = new Map<number, FrameProfile>();
  const get = (f: number) => {
    let p = frames.get(f);
    if (!p) frames.set(f, p = { frame: f, index: -1, instructions: 0, stages: [], decisions: [], steps: [] });
    return p;
  };
  for (const o of occurrences) {
    if (o.frame < 0) continue;
    const p = get(o.frame);
    if (o.kind === 'frame') { p.index = o.index; p.instructions = o.instructions; }
    else if (o.kind === 'step') p.steps.push({ stage: o.stage ?? -1, index: o.index, instructions: o.instructions });
    else (o.kind === 'stage' ? p.stages : p.decisions).push({ index: o.index, instructions: o.instructions });
  }
  return [...frames.values()].sort((a, b) => a.frame - b.frame);
}

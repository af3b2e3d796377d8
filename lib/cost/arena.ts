// The arena plan: an offset for every activation in one block of RAM, so that no
// two values live at the same step share a byte. The live-set peak (memory.ts) is
// the lower bound for a node order; fragmentation can push a real plan above it.
// Two heuristics from Pisarchyk & Lee 2020, "Efficient Memory Management for Deep
// Neural Net Inference": greedy by size and greedy by breadth; then a few rounds of
// squeaky wheel optimization over their orders, for the layouts both miss. The
// smallest plan wins.
import type { LiveValue } from './memory.js';

/**
 * Offsets are multiples of 16 bytes (common practice for microcontroller arenas: a
 * 128-bit vector load, as Helium/MVE cores do, and most DMA engines want 16-byte
 * aligned buffers; it also keeps every float32, int32 and int64 element aligned).
 * Sizes are not padded: a buffer's end only pushes the next offset up to 16.
 */
export const ARENA_ALIGN = 16;

export type ArenaMethod = 'greedy-by-size' | 'greedy-by-breadth' | 'squeaky-wheel';
export interface Slot { name: string; offset: bigint; bytes: bigint; birth: number; death: number }
export interface ArenaPlan {
  /** arena size: the largest offset + bytes over all slots */
  bytes: bigint;
  /** live-set peak over the same steps: no plan for this order can be smaller */
  bound: bigint;
  method: ArenaMethod;
  align: number;
  /** one per activation live in the steps planned, in the order given (ranges clipped to the steps) */
  slots: Slot[];
}

const alignUp = (x: bigint, a: bigint) => ((x + a - 1n) / a) * a;
const meet = (a: { birth: number; death: number }, b: { birth: number; death: number }) => a.birth <= b.death && b.birth <= a.death;
/** Larger first; then earlier birth; then name (code-unit order), so ties never depend on the engine's sort. */
const bySize = (a: LiveValue, b: LiveValue) => (a.bytes !== b.bytes ? (a.bytes > b.bytes ? -1 : 1) : a.birth - b.birth || (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));

/**
 * Place values one at a time, each in the smallest gap among the placed values it
 * meets in time that holds it (best fit), else above them all. The paper's offset
 * rule for both heuristics; only the order of the values differs.
 */
function place(order: LiveValue[], align: bigint): Map<string, bigint> {
  const at = new Map<string, bigint>();
  const placed: { v: LiveValue; offset: bigint }[] = [];
  for (const v of order) {
    let prev = 0n, best: bigint | undefined, bestGap = 0n;
    for (const p of placed) {
      if (!meet(p.v, v) || p.v.bytes === 0n) continue;
      if (p.offset > prev) {
        const gap = p.offset - prev;
        if (gap >= v.bytes && (best === undefined || gap < bestGap)) { best = prev; bestGap = gap; }
      }
      const end = alignUp(p.offset + p.v.bytes, align);
      if (end > prev) prev = end;
    }
    const offset = v.bytes === 0n ? 0n : best ?? prev;
    at.set(v.name, offset);
    // Kept sorted by offset (then by order of placing), so gaps are found in one sweep.
    let i = placed.length;
    while (i > 0 && placed[i - 1].offset > offset) i--;
    placed.splice(i, 0, { v, offset });
  }
  return at;
}

/** Greedy by size: values in non-increasing size. */
function greedyBySize(values: LiveValue[]): LiveValue[] {
  return [...values].sort(bySize);
}

/**
 * Greedy by breadth: steps in non-increasing breadth (bytes live there), ties by
 * step; at each, its live values not yet placed, in non-increasing size.
 */
function greedyByBreadth(values: LiveValue[], from: number, to: number): LiveValue[] {
  const live: LiveValue[][] = Array.from({ length: to - from + 1 }, () => []);
  for (const v of values) for (let s = v.birth; s <= v.death; s++) live[s - from].push(v);
  const breadth = live.map((l) => l.reduce((a, v) => a + v.bytes, 0n));
  const steps = live.map((_, i) => i).sort((a, b) => (breadth[a] !== breadth[b] ? (breadth[a] > breadth[b] ? -1 : 1) : a - b));
  const seen = new Set<LiveValue>();
  const out: LiveValue[] = [];
  for (const s of steps) for (const v of [...live[s]].sort(bySize)) if (!seen.has(v)) { seen.add(v); out.push(v); }
  return out;
}

/** Clip ranges to steps [from, to], as peakOver counts them; values outside are dropped. */
function clip(ranges: LiveValue[], from: number, to: number): LiveValue[] {
  const out: LiveValue[] = [];
  for (const v of ranges) {
    const birth = Math.max(v.birth, from), death = Math.min(v.death, to);
    if (birth <= death) out.push({ name: v.name, bytes: v.bytes, birth, death });
  }
  return out;
}

/**
 * An arena plan for the values live in steps [from, to] (default: from 0 to the last
 * death). Names must be distinct. Same ranges, same plan: every tie has a fixed order.
 */
export function planArena(ranges: LiveValue[], opts: { from?: number; to?: number; align?: number; methods?: readonly ArenaMethod[] } = {}): ArenaPlan {
  const from = opts.from ?? 0;
  const to = opts.to ?? ranges.reduce((a, v) => Math.max(a, v.death), from - 1);
  const align = opts.align ?? ARENA_ALIGN;
  const values = clip(ranges, from, to);
  const a = BigInt(align);
  const methods = opts.methods ?? ['greedy-by-size', 'greedy-by-breadth', 'squeaky-wheel'];
  const bound = liveBound(values);
  const run = (order: LiveValue[]) => {
    const at = place(order, a);
    const bytes = values.reduce((m, v) => { const end = at.get(v.name)! + v.bytes; return end > m ? end : m; }, 0n);
    return { at, bytes, order };
  };
  const bySize = run(greedyBySize(values));
  const byBreadth = methods.includes('greedy-by-breadth') || methods.includes('squeaky-wheel') ? run(greedyByBreadth(values, from, to)) : bySize;
  const plans: { method: ArenaMethod; at: Map<string, bigint>; bytes: bigint }[] = [];
  for (const m of methods) {
    if (m === 'greedy-by-size') plans.push({ method: m, ...bySize });
    else if (m === 'greedy-by-breadth') plans.push({ method: m, ...byBreadth });
    else plans.push({ method: m, ...squeakyWheel([bySize, byBreadth], bound, run) });
  }
  // The smaller arena; on a tie, the method listed first (greedy by size by default).
  const best = plans.reduce((x, y) => (y.bytes < x.bytes ? y : x));
  return {
    bytes: best.bytes, bound, method: best.method, align,
    slots: values.map((v) => ({ name: v.name, offset: best.at.get(v.name)!, bytes: v.bytes, birth: v.birth, death: v.death })),
  };
}

/** Rounds of re-prioritising per start; each is one placement pass, O(values²). */
const WHEEL_ROUNDS = 8;

/**
 * Squeaky wheel optimization (Joslin & Clements 1999) over the greedy orders: the values a plan puts
 * above the live-set bound go first in the next round, the rest keep their order. Greedy by size puts
 * every large buffer first, into fixed slots; in a chain of residual blocks the block inputs then
 * stack above both slots, while the optimum alternates them with the large buffers from block to
 * block. Putting those inputs first finds that layout. Never worse than its starting plans.
 */
function squeakyWheel(starts: { at: Map<string, bigint>; bytes: bigint; order: LiveValue[] }[], bound: bigint, run: (o: LiveValue[]) => { at: Map<string, bigint>; bytes: bigint; order: LiveValue[] }) {
  let best = starts.reduce((x, y) => (y.bytes < x.bytes ? y : x));
  for (const start of starts) {
    let cur = start;
    const seen = new Set<string>();
    for (let round = 0; round < WHEEL_ROUNDS && best.bytes > bound; round++) {
      const high = cur.order.filter((v) => cur.at.get(v.name)! + v.bytes > bound);
      if (!high.length) break;
      const high1 = new Set(high);
      const order = [...high, ...cur.order.filter((v) => !high1.has(v))];
      const key = order.map((v) => v.name).join('\0');
      if (seen.has(key)) break;
      seen.add(key);
      cur = run(order);
      if (cur.bytes < best.bytes) best = cur;
    }
  }
  return best;
}

/** Largest sum of bytes live at one step (the values are already clipped). */
function liveBound(values: LiveValue[]): bigint {
  const events = new Map<number, bigint>();
  for (const v of values) {
    events.set(v.birth, (events.get(v.birth) ?? 0n) + v.bytes);
    events.set(v.death + 1, (events.get(v.death + 1) ?? 0n) - v.bytes);
  }
  let cur = 0n, best = 0n;
  for (const s of [...events.keys()].sort((x, y) => x - y)) { cur += events.get(s)!; if (cur > best) best = cur; }
  return best;
}

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

/** 'stacked': every value its own bytes, only where the sizes sum beyond 2^53 (see Problem). */
export type ArenaMethod = 'greedy-by-size' | 'greedy-by-breadth' | 'squeaky-wheel' | 'stacked';
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

/**
 * Placing works on numbers: exact while the values' sizes, each rounded up to the alignment, sum to at
 * most 2^53 (8 PiB). Beyond that every value simply gets bytes of its own ('stacked', in bigint).
 */
interface Problem { n: number; size: Float64Array; birth: Int32Array; death: Int32Array; name: string[]; meets: number[][]; align: number }

/** Larger first; then earlier birth; then name (code-unit order), so ties never depend on the engine's sort. */
const bySize = (p: Problem) => (a: number, b: number) =>
  p.size[b] - p.size[a] || p.birth[a] - p.birth[b] || (p.name[a] < p.name[b] ? -1 : p.name[a] > p.name[b] ? 1 : 0);

/**
 * For each value, the others alive at some common step (a sweep by birth). Placing a value looks only
 * at these, so a pass costs the sum of the live sets, not the square of the value count.
 */
function meetings(birth: Int32Array, death: Int32Array): number[][] {
  const n = birth.length;
  const out: number[][] = Array.from({ length: n }, () => []);
  const byBirth = Array.from({ length: n }, (_, i) => i).sort((a, b) => birth[a] - birth[b] || a - b);
  let active: number[] = [];
  for (const v of byBirth) {
    active = active.filter((a) => death[a] >= birth[v]);
    for (const a of active) { out[a].push(v); out[v].push(a); }
    active.push(v);
  }
  return out;
}

/**
 * Place values one at a time, each in the smallest gap among the placed values it
 * meets in time that holds it (best fit), else above them all. The paper's offset
 * rule for both heuristics; only the order of the values differs.
 */
function place(p: Problem, order: readonly number[]): { at: Float64Array; bytes: number } {
  const at = new Float64Array(p.n).fill(-1);
  const near: number[] = [];
  let top = 0;
  for (const v of order) {
    const size = p.size[v];
    if (size === 0) { at[v] = 0; continue; }
    near.length = 0;
    for (const u of p.meets[v]) if (at[u] >= 0 && p.size[u] > 0) near.push(u);
    // By offset; among equal offsets the order does not change the result.
    near.sort((x, y) => at[x] - at[y]);
    let prev = 0, best = -1, bestGap = 0;
    for (const u of near) {
      const gap = at[u] - prev;
      if (gap >= size && (best < 0 || gap < bestGap)) { best = prev; bestGap = gap; }
      const end = Math.ceil((at[u] + p.size[u]) / p.align) * p.align;
      if (end > prev) prev = end;
    }
    at[v] = best >= 0 ? best : prev;
    if (at[v] + size > top) top = at[v] + size;
  }
  return { at, bytes: top };
}

/** Greedy by size: values in non-increasing size. */
const greedyBySize = (p: Problem): number[] => Array.from({ length: p.n }, (_, i) => i).sort(bySize(p));

/**
 * Greedy by breadth: steps in non-increasing breadth (bytes live there), ties by
 * step; at each, its live values not yet placed, in non-increasing size.
 */
function greedyByBreadth(p: Problem, from: number, to: number): number[] {
  const live: number[][] = Array.from({ length: to - from + 1 }, () => []);
  for (let v = 0; v < p.n; v++) for (let s = p.birth[v]; s <= p.death[v]; s++) live[s - from].push(v);
  const breadth = live.map((l) => l.reduce((a, v) => a + p.size[v], 0));
  const steps = live.map((_, i) => i).sort((a, b) => breadth[b] - breadth[a] || a - b);
  const seen = new Uint8Array(p.n);
  const out: number[] = [];
  const cmp = bySize(p);
  for (const s of steps) for (const v of live[s].sort(cmp)) if (!seen[v]) { seen[v] = 1; out.push(v); }
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
  const bound = liveBound(values);
  const a = BigInt(align);
  const slots = (offset: (i: number) => bigint): Slot[] => values.map((v, i) => ({ name: v.name, offset: offset(i), bytes: v.bytes, birth: v.birth, death: v.death }));
  const total = values.reduce((t, v) => t + ((v.bytes + a - 1n) / a) * a, 0n);
  if (total > BigInt(Number.MAX_SAFE_INTEGER)) {
    let next = 0n;
    const at = values.map((v) => { const o = next; next += ((v.bytes + a - 1n) / a) * a; return o; });
    return { bytes: values.length ? at[at.length - 1] + values[values.length - 1].bytes : 0n, bound, method: 'stacked', align, slots: slots((i) => at[i]) };
  }
  const birth = Int32Array.from(values, (v) => v.birth), death = Int32Array.from(values, (v) => v.death);
  const p: Problem = { n: values.length, size: Float64Array.from(values, (v) => Number(v.bytes)), birth, death, name: values.map((v) => v.name), meets: meetings(birth, death), align };
  const methods = opts.methods ?? ['greedy-by-size', 'greedy-by-breadth', 'squeaky-wheel'];
  const run = (order: number[]): Run => ({ ...place(p, order), order });
  const bySizeRun = run(greedyBySize(p));
  const byBreadthRun = methods.includes('greedy-by-breadth') || methods.includes('squeaky-wheel') ? run(greedyByBreadth(p, from, to)) : bySizeRun;
  const plans = methods.map((method) => ({
    method,
    ...(method === 'greedy-by-size' ? bySizeRun : method === 'greedy-by-breadth' ? byBreadthRun : squeakyWheel([bySizeRun, byBreadthRun], p, alignedBound(p, from, to), run)),
  }));
  // The smaller arena; on a tie, the method listed first (greedy by size by default).
  const best = plans.reduce((x, y) => (y.bytes < x.bytes ? y : x));
  return { bytes: BigInt(best.bytes), bound, method: best.method, align, slots: slots((i) => BigInt(best.at[i])) };
}

/**
 * The live-set bound with alignment: at a step, live buffers sit one above another, and each but the
 * topmost is followed by an aligned offset, so it takes its size rounded up. No plan goes below this;
 * a plan that reaches it cannot be improved.
 */
function alignedBound(p: Problem, from: number, to: number): number {
  const sum = new Float64Array(to - from + 2), slack = new Float64Array(to - from + 2);
  for (let v = 0; v < p.n; v++) {
    if (!p.size[v]) continue;
    const up = Math.ceil(p.size[v] / p.align) * p.align;
    for (let s = p.birth[v]; s <= p.death[v]; s++) { sum[s - from] += up; if (up - p.size[v] > slack[s - from]) slack[s - from] = up - p.size[v]; }
  }
  let best = 0;
  for (let s = 0; s < sum.length; s++) if (sum[s] - slack[s] > best) best = sum[s] - slack[s];
  return best;
}

/** Rounds of re-prioritising per start; each is one placement pass. */
const WHEEL_ROUNDS = 8;

type Run = { at: Float64Array; bytes: number; order: number[] };
/**
 * Squeaky wheel optimization (Joslin & Clements 1999) over the greedy orders: the values a plan puts
 * above the (aligned) live-set bound go first in the next round, the rest keep their order. Greedy by size puts
 * every large buffer first, into fixed slots; in a chain of residual blocks the block inputs then
 * stack above both slots, while the optimum alternates them with the large buffers from block to
 * block. Putting those inputs first finds that layout. Never worse than its starting plans.
 */
function squeakyWheel(starts: Run[], p: Problem, bound: number, run: (o: number[]) => Run): Run {
  let best = starts.reduce((x, y) => (y.bytes < x.bytes ? y : x));
  for (const start of starts) {
    let cur = start;
    const seen = new Set<string>();
    for (let round = 0; round < WHEEL_ROUNDS && best.bytes > bound; round++) {
      const high = cur.order.filter((v) => cur.at[v] + p.size[v] > bound);
      if (!high.length) break;
      const isHigh = new Uint8Array(p.n);
      for (const v of high) isHigh[v] = 1;
      const order = [...high, ...cur.order.filter((v) => !isHigh[v])];
      const key = order.join(',');
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

// Memory-aware node order. A microcontroller interpreter runs the nodes in the
// file's order and keeps every value from its producer to its last reader, so the
// order alone can change the peak activation memory. This pass reorders nodes
// within each stage (never across a cut, and the node making the cut stays last,
// so every stage keeps its nodes and its handover) to lower that peak.
import type { Graph, Model } from '../graph/ir.js';
import { readsOf } from '../graph/links.js';
import { graphError } from '../errors.js';
import { liveRanges, type LiveValue } from './memory.js';
import type { CostReport } from './report.js';

export type OrderMethod = 'kept' | 'greedy' | 'exact';
export interface StageOrder { index: number; first: number; last: number; before: bigint; after: bigint; method: OrderMethod; moved: number }
export interface MemoryOrder {
  /** node indices, a permutation of the given order */
  order: number[];
  stages: StageOrder[];
  before: bigint; after: bigint;
}
export interface MemoryOrderOptions {
  /** stages with at most this many nodes are searched exhaustively (default 20) */
  exactNodes?: number;
  /** give up the exhaustive search past this many distinct states (default 200000) */
  exactStates?: number;
}

interface Segment {
  nodes: number[];
  /** position in `nodes` of each node's producers inside the segment */
  preds: number[][];
  /** values made or read here: bytes, readers inside the segment, kept past the segment */
  values: Map<string, { bytes: bigint; readers: number; kept: boolean }>;
  reads: string[][]; outs: string[][];
  /** bytes live on entry (made earlier, read here or later) */
  entry: bigint;
  /** position that must run last (the node making the cut), or -1 */
  pinned: number;
}

/**
 * A lower-peak order for `order`, cut after the steps in `bounds` (each stage's
 * last step). `sizes` holds the bytes of every activation (values missing from it,
 * such as weights, cost nothing); `inputs`/`outputs` are the graph's.
 * Each stage takes the best of: its current order, two greedy list schedules and,
 * for small stages, an exhaustive search; ties keep the current order, so the peak
 * never gets worse.
 */
export function memoryOrder(
  g: Graph, order: number[], sizes: Map<string, bigint>, bounds: number[], io: { inputs: string[]; outputs: string[] }, opts: MemoryOrderOptions = {},
): MemoryOrder {
  if (!order.length) return { order: [], stages: [], before: 0n, after: 0n };
  const ioNodes = g.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));
  const ranges = liveRanges(order, ioNodes, sizes, io.inputs, io.outputs);
  const byName = new Map(ranges.map((r) => [r.name, r]));
  const outputs = new Set(io.outputs);
  const ends = [...bounds.filter((b) => b < order.length - 1), order.length - 1];
  const out: number[] = [];
  const stages: StageOrder[] = [];
  let first = 0, before = 0n, after = 0n;
  ends.forEach((last, k) => {
    if (last < first) throw graphError(`stage ${k} is empty (bounds must increase)`);
    const nodes = order.slice(first, last + 1);
    const seg = segment(g, nodes, sizes, byName, outputs, first, last, k < ends.length - 1);
    const current = nodes.map((_, i) => i);
    const candidates: [OrderMethod, number[]][] = [['kept', current], ['greedy', greedy(seg, 'net')], ['greedy', greedy(seg, 'alloc')]];
    if (nodes.length <= (opts.exactNodes ?? 20)) {
      const e = exact(seg, opts.exactStates ?? 200000);
      if (e) candidates.push(['exact', e]);
    }
    let best = candidates[0], bestPeak = peakOf(seg, best[1]);
    const beforePeak = bestPeak;
    for (const c of candidates.slice(1)) { const p = peakOf(seg, c[1]); if (p < bestPeak) { best = c; bestPeak = p; } }
    const chosen = best[1].map((i) => nodes[i]);
    stages.push({ index: k, first, last, before: beforePeak, after: bestPeak, method: best[0], moved: chosen.filter((x, i) => x !== nodes[i]).length });
    out.push(...chosen);
    if (beforePeak > before) before = beforePeak;
    if (bestPeak > after) after = bestPeak;
    first = last + 1;
  });
  return { order: out, stages, before, after };
}

function segment(g: Graph, nodes: number[], sizes: Map<string, bigint>, ranges: Map<string, LiveValue>, outputs: Set<string>, first: number, last: number, pinLast: boolean): Segment {
  const made = new Map<string, number>();
  nodes.forEach((n, i) => { for (const o of g.nodes[n].outputs) if (o) made.set(o, i); });
  const reads = nodes.map((n) => [...new Set(readsOf(g.nodes[n]))]);
  const outs = nodes.map((n) => g.nodes[n].outputs.filter((o) => o && sizes.has(o)));
  const values: Segment['values'] = new Map();
  const kept = (r: LiveValue) => r.death > last || outputs.has(r.name);
  let entry = 0n;
  // Live on entry: made before the stage and read in it or after it.
  for (const r of ranges.values()) if (r.birth < first && r.death >= first) { values.set(r.name, { bytes: r.bytes, readers: 0, kept: kept(r) }); entry += r.bytes; }
  nodes.forEach((_, i) => { for (const o of outs[i]) { const r = ranges.get(o)!; values.set(o, { bytes: r.bytes, readers: 0, kept: kept(r) }); } });
  reads.forEach((rs) => { for (const r of rs) { const v = values.get(r); if (v) v.readers++; } });
  const preds = reads.map((rs) => [...new Set(rs.map((r) => made.get(r)).filter((p): p is number => p !== undefined))]);
  return { nodes, preds, values, reads, outs, entry, pinned: pinLast ? nodes.length - 1 : -1 };
}

/** Live bytes at each step of `perm` (positions in the segment), as liveRanges/peakOver count them. */
function peakOf(s: Segment, perm: number[]): bigint {
  const left = new Map([...s.values].map(([k, v]) => [k, v.readers]));
  let cur = s.entry, peak = 0n;
  for (const i of perm) {
    const alloc = s.outs[i].reduce((a, o) => a + s.values.get(o)!.bytes, 0n);
    if (cur + alloc > peak) peak = cur + alloc;
    cur += alloc - freedBy(s, i, left, true);
  }
  return peak;
}

/** Bytes that die after position `i` runs; with `commit`, counts the reads done. */
function freedBy(s: Segment, i: number, left: Map<string, number>, commit: boolean): bigint {
  let f = 0n;
  for (const r of s.reads[i]) {
    const v = s.values.get(r);
    if (!v) continue;
    const n = left.get(r)! - 1;
    if (commit) left.set(r, n);
    if (n === 0 && !v.kept) f += v.bytes;
  }
  for (const o of s.outs[i]) { const v = s.values.get(o)!; if (v.readers === 0 && !v.kept) f += v.bytes; }
  return f;
}

/**
 * List scheduling: among ready nodes, 'net' picks the one that grows live memory
 * least (allocates minus frees), 'alloc' the one that allocates least; ties go to
 * the current order, so the result is deterministic.
 */
function greedy(s: Segment, rule: 'net' | 'alloc'): number[] {
  const n = s.nodes.length;
  const waiting = s.preds.map((p) => p.length);
  const succ: number[][] = s.nodes.map(() => []);
  s.preds.forEach((ps, i) => ps.forEach((p) => succ[p].push(i)));
  const left = new Map([...s.values].map(([k, v]) => [k, v.readers]));
  const ready = new Set<number>(waiting.flatMap((w, i) => (w === 0 ? [i] : [])));
  const perm: number[] = [];
  while (perm.length < n) {
    let best = -1, bestKey: [bigint, bigint] = [0n, 0n];
    for (const i of [...ready].sort((a, b) => a - b)) {
      if (i === s.pinned && ready.size > 1) continue;
      const alloc = s.outs[i].reduce((a, o) => a + s.values.get(o)!.bytes, 0n);
      const net = alloc - freedBy(s, i, left, false);
      const key: [bigint, bigint] = rule === 'net' ? [net, alloc] : [alloc, net];
      if (best < 0 || key[0] < bestKey[0] || (key[0] === bestKey[0] && key[1] < bestKey[1])) { best = i; bestKey = key; }
    }
    ready.delete(best);
    perm.push(best);
    freedBy(s, best, left, true);
    for (const c of succ[best]) if (--waiting[c] === 0) ready.add(c);
  }
  return perm;
}

/**
 * Exhaustive search over the sets of nodes already run (the live bytes depend on
 * the set, not on the order it ran in): best(S) = min over ready v of
 * max(step bytes of v after S, best(S ∪ {v})). Undefined past `maxStates`.
 */
function exact(s: Segment, maxStates: number): number[] | undefined {
  const n = s.nodes.length;
  if (n > 30) return undefined;
  const predMask = s.preds.map((ps) => ps.reduce((m, p) => m | (1 << p), 0));
  const readerMask = new Map<string, number>();
  s.reads.forEach((rs, i) => rs.forEach((r) => { if (s.values.has(r)) readerMask.set(r, (readerMask.get(r) ?? 0) | (1 << i)); }));
  const alloc = s.outs.map((os) => os.reduce((a, o) => a + s.values.get(o)!.bytes, 0n));
  const full = (1 << n) - 1;
  const producer = new Map<string, number>();
  s.outs.forEach((os, i) => os.forEach((o) => producer.set(o, i)));
  const vals = [...s.values].map(([name, v]) => ({ v, readers: readerMask.get(name) ?? 0, mine: producer.get(name) ?? -1 }));
  // Live bytes after running the set `done`: entry values and outputs of `done` still wanted.
  const liveAfter = (done: number): bigint => {
    let b = 0n;
    for (const { v, readers, mine } of vals) {
      if (mine >= 0 && !(done & (1 << mine))) continue;
      if (v.kept || (readers & ~done) !== 0) b += v.bytes;
    }
    return b;
  };
  const memo = new Map<number, { peak: bigint; next: number }>();
  let states = 0;
  const solve = (done: number): bigint | undefined => {
    if (done === full) return 0n;
    const m = memo.get(done);
    if (m) return m.peak;
    if (++states > maxStates) return undefined;
    const cur = liveAfter(done);
    let best: bigint | undefined, next = -1;
    const onlyPinnedLeft = s.pinned >= 0 && (full & ~done) === 1 << s.pinned;
    for (let i = 0; i < n; i++) {
      if (done & (1 << i) || (predMask[i] & done) !== predMask[i]) continue;
      if (i === s.pinned && !onlyPinnedLeft) continue;
      const step = cur + alloc[i];
      if (best !== undefined && step >= best) continue;
      const rest = solve(done | (1 << i));
      if (rest === undefined) return undefined;
      const p = rest > step ? rest : step;
      if (best === undefined || p < best) { best = p; next = i; }
    }
    memo.set(done, { peak: best!, next });
    return best;
  };
  if (solve(0) === undefined) return undefined;
  const perm: number[] = [];
  for (let done = 0; done !== full;) { const { next } = memo.get(done)!; perm.push(next); done |= 1 << next; }
  return perm;
}

/** Graph → graph: the same nodes in `order` (a permutation of all node indices). */
export function reorderGraph(g: Graph, order: number[]): Graph {
  if (order.length !== g.nodes.length || new Set(order).size !== order.length) throw graphError(`reorder: ${order.length} steps for ${g.nodes.length} nodes`);
  return { ...g, nodes: order.map((i) => g.nodes[i]) };
}

/** The memory-aware order of a costed model, stage by stage as the report cuts it. */
export function memoryOrderOf(model: Model, report: CostReport, opts: MemoryOrderOptions = {}): MemoryOrder {
  const sizes = new Map<string, bigint>();
  for (const t of report.model.inputs) sizes.set(t.name, t.bytes);
  for (const n of report.nodes) if (n.op !== 'Constant') for (const o of n.outputs) sizes.set(o.name, o.bytes);
  return memoryOrder(model.graph, report.nodes.map((n) => n.index), sizes, report.stages.slice(0, -1).map((s) => s.last),
    { inputs: report.model.inputs.map((t) => t.name), outputs: report.model.outputs.map((t) => t.name) }, opts);
}

/** Model → model with the graph's nodes in the memory-aware order. */
export function reorderModel<M extends Model>(model: M, report: CostReport, opts: MemoryOrderOptions = {}): { model: M; order: MemoryOrder } {
  const order = memoryOrderOf(model, report, opts);
  return { model: { ...model, graph: reorderGraph(model.graph, order.order) }, order };
}

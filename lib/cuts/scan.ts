// Candidate cut points over a node order. The crossing set of a boundary is the
// non-weight values live across it (made at or before it, read after it); a graph
// output crosses only if a later node reads it, since the stage that makes it
// hands it out directly. A cut with one crossing tensor is clean.
import type { Model } from '../graph/ir.js';
import { linkGraph, readsOf } from '../graph/links.js';
import type { InferOptions, ShapeResult } from '../shapes/infer.js';
import { completeShapes } from '../cost/analyze.js';
import { costModel } from '../cost/report.js';
import { liveRanges, type LiveValue } from '../cost/memory.js';
import { bytesFor, dtypeName } from '../onnx/dtype.js';
import { OfframpError } from '../errors.js';
import { blockOrder, fileOrder, hoistSide, neededNodes, weightNames, type OrderKind } from './order.js';
import { exitOutputs } from './exits.js';

/** Crossing sets above this size are not candidates. */
export const MAX_CROSSING = 3;

export interface CutTensor { name: string; dtype: string; shape: (number | string)[]; bytes: bigint }
export interface Cut {
  /** the boundary lies after this step of the plan's order */
  step: number;
  /** crossing tensors, in the order they were made */
  tensors: CutTensor[];
  clean: boolean;
  handoverBytes: bigint;
  /** share of the model's MACs computed before the boundary */
  macFraction: number;
  /** the node just before the boundary */
  after: { index: number; name: string; op: string };
}

export interface CutPlan {
  model: Model & { file?: string };
  shapes: ShapeResult;
  order: OrderKind;
  /** node indices, one per step */
  steps: number[];
  /** clean cuts each order offers (the plan uses the one with more; the file order on a tie) */
  cleanBy: Record<OrderKind, number>;
  /** MACs per step, and the model total */
  macs: bigint[];
  totalMacs: bigint;
  ranges: LiveValue[];
  /** every boundary with at most MAX_CROSSING tensors, one per run of equal crossing sets (its last boundary) */
  candidates: Cut[];
  exits: string[];
  warnings: string[];
}

interface OrderCuts { steps: number[]; ranges: LiveValue[]; cuts: { step: number; names: string[] }[] }

function cutsOver(model: Model, steps: number[], sizes: Map<string, bigint>): OrderCuts {
  const g = model.graph;
  const nodes = g.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));
  const inputs = g.inputs.map((v) => v.name).filter((n) => sizes.has(n));
  const ranges = liveRanges(steps, nodes, sizes, inputs, []);
  const byBirth = new Map<number, LiveValue[]>();
  for (const r of ranges) if (r.death > r.birth) { let l = byBirth.get(r.birth); if (!l) byBirth.set(r.birth, (l = [])); l.push(r); }
  const active = new Map<string, LiveValue>();
  const cuts: OrderCuts['cuts'] = [];
  let prev = '';
  for (const r of byBirth.get(-1) ?? []) active.set(r.name, r);
  for (let b = 0; b < steps.length - 1; b++) {
    for (const r of byBirth.get(b) ?? []) active.set(r.name, r);
    for (const [k, r] of active) if (r.death <= b) active.delete(k);
    if (active.size === 0 || active.size > MAX_CROSSING) { prev = ''; continue; }
    const names = [...active.values()].sort((x, y) => x.birth - y.birth || (x.name < y.name ? -1 : 1)).map((r) => r.name);
    const key = names.join('\0');
    // A run of equal crossing sets is one cut; its last boundary keeps side branches (exit heads) in the earlier stage.
    if (key === prev) cuts[cuts.length - 1].step = b;
    else cuts.push({ step: b, names });
    prev = key;
  }
  return { steps, ranges, cuts };
}

/** Find the cut candidates of a model whose shapes are complete (see completeShapes). */
export function planCuts(model: Model & { file?: string }, shapes: ShapeResult): CutPlan {
  const g = model.graph;
  const links = linkGraph(g);
  const weights = weightNames(g);
  const exits = exitOutputs(model);
  const outs = g.outputs.map((o) => o.name);
  const mainOuts = outs.filter((o) => !exits.includes(o));
  const need = neededNodes(g, outs, links);
  const main = neededNodes(g, mainOuts.length ? mainOuts : outs, links);
  const warnings: string[] = [];

  const sizes = new Map<string, bigint>();
  const typeOf = (name: string) => shapes.values.get(name)?.type;
  const byteSize = (name: string): bigint => {
    const t = typeOf(name);
    if (!t?.shape || !t.shape.every((d) => typeof d === 'number')) return 0n;
    return bytesFor(t.dtype, t.shape.reduce((a: bigint, d) => a * BigInt(d as number), 1n));
  };
  for (const v of g.inputs) if (!weights.has(v.name)) sizes.set(v.name, byteSize(v.name));
  for (const i of need) for (const o of g.nodes[i].outputs) if (o) sizes.set(o, byteSize(o));

  const cost = costModel(model, { shapes });
  const macOf = new Map(cost.nodes.map((n) => [n.index, n.macs]));
  warnings.push(...cost.warnings);

  const file = cutsOver(model, hoistSide(g, fileOrder(g, need, links), main, links), sizes);
  const block = cutsOver(model, hoistSide(g, blockOrder(g, need, [...mainOuts, ...exits], links), main, links), sizes);
  const clean = (o: OrderCuts) => o.cuts.filter((c) => c.names.length === 1).length;
  const use = clean(block) > clean(file) ? block : file;
  const macs = use.steps.map((i) => macOf.get(i) ?? 0n);
  const totalMacs = macs.reduce((a, b) => a + b, 0n);
  const plan: CutPlan = {
    model, shapes, order: use === file ? 'file' : 'block', steps: use.steps, cleanBy: { file: clean(file), block: clean(block) },
    macs, totalMacs, ranges: use.ranges, candidates: [], exits, warnings,
  };
  plan.candidates = use.cuts.map((c) => describeCut(plan, c.step, c.names));
  return plan;
}

export function describeCut(plan: CutPlan, step: number, names: string[]): Cut {
  const tensors = names.map((name): CutTensor => {
    const t = plan.shapes.values.get(name)?.type;
    const r = plan.ranges.find((x) => x.name === name);
    return { name, dtype: t ? dtypeName(t.dtype) : 'unknown', shape: t?.shape ?? [], bytes: r?.bytes ?? 0n };
  });
  let before = 0n;
  for (let s = 0; s <= step; s++) before += plan.macs[s];
  const i = plan.steps[step];
  const n = plan.model.graph.nodes[i];
  return {
    step, tensors, clean: tensors.length === 1, handoverBytes: tensors.reduce((a, t) => a + t.bytes, 0n),
    macFraction: plan.totalMacs ? Number((before * 1000000n) / plan.totalMacs) / 1e6 : (step + 1) / plan.steps.length,
    after: { index: i, name: n.name, op: n.op },
  };
}

/** Values crossing the boundary after `step`. */
export function crossingAt(plan: CutPlan, step: number): string[] {
  return plan.ranges.filter((r) => r.birth <= step && step < r.death)
    .sort((x, y) => x.birth - y.birth || (x.name < y.name ? -1 : 1)).map((r) => r.name);
}

/**
 * Resolve a cut given by name: 'v' or 'a+b' (values, or a node name meaning its
 * first output). The boundary is the one, among those where all named values are
 * live, with the fewest crossing tensors; the latest of those on a tie.
 */
export function resolveCut(plan: CutPlan, spec: string): Cut {
  const g = plan.model.graph;
  const names = spec.split('+').map((s) => s.trim()).filter(Boolean).map((s) => {
    const r = plan.ranges.find((x) => x.name === s);
    if (r) return r;
    const node = g.nodes.find((n) => n.name === s);
    const byNode = node && plan.ranges.find((x) => x.name === node.outputs[0]);
    if (byNode) return byNode;
    throw new OfframpError('usage', `cut '${s}' names no activation of the graph (weights and unused values cannot be cut at)`, plan.model.file);
  });
  if (!names.length) throw new OfframpError('usage', `empty cut '${spec}'`);
  const from = Math.max(0, ...names.map((r) => r.birth));
  const to = Math.min(plan.steps.length - 2, ...names.map((r) => r.death - 1));
  if (from > to) throw new OfframpError('usage', `cut '${spec}': no boundary has ${names.length > 1 ? 'all of these' : 'it'} live (nothing later reads ${names.length > 1 ? 'them together' : 'it'})`, plan.model.file);
  let best = from, bestSize = Infinity;
  for (let b = from; b <= to; b++) {
    const size = plan.ranges.reduce((a, r) => a + (r.birth <= b && b < r.death ? 1 : 0), 0);
    if (size <= bestSize) { best = b; bestSize = size; }
  }
  return describeCut(plan, best, crossingAt(plan, best));
}

/** The clean cut nearest each MAC fraction (0..1), distinct, in order. */
export function cutsAtFractions(plan: CutPlan, fractions: number[]): Cut[] {
  const clean = plan.candidates.filter((c) => c.clean);
  if (!clean.length) throw new OfframpError('usage', 'the model has no clean cut (no boundary with a single crossing tensor)', plan.model.file);
  const picked = new Map<number, Cut>();
  // Cuts at the same MAC share are the same point of the computation: take the smallest handover there.
  const better = (c: Cut, best: Cut, f: number) => {
    const d = Math.abs(c.macFraction - f) - Math.abs(best.macFraction - f);
    // On a full tie the later boundary wins: after an activation or a pooling, the features a head reads are better.
    return d < -1e-12 || (Math.abs(d) <= 1e-12 && (c.handoverBytes < best.handoverBytes || (c.handoverBytes === best.handoverBytes && c.step > best.step)));
  };
  for (const f of fractions) {
    let best = clean[0];
    for (const c of clean) if (better(c, best, f)) best = c;
    picked.set(best.step, best);
  }
  return [...picked.values()].sort((a, b) => a.step - b.step);
}

/**
 * Ranking for `--top N`: N targets spread evenly over the MACs (k/(N+1)); a cut
 * scores its distance to the nearest target plus a penalty for handover size
 * (relative to the largest candidate) and for each extra tensor.
 */
export function rankCuts(cuts: Cut[], n: number): { cut: Cut; score: number }[] {
  const k = Math.max(1, n);
  const maxBytes = cuts.reduce((a, c) => (c.handoverBytes > a ? c.handoverBytes : a), 1n);
  const targets = Array.from({ length: k }, (_, i) => (i + 1) / (k + 1));
  const scored = cuts.map((cut) => ({
    cut,
    score: Math.min(...targets.map((t) => Math.abs(cut.macFraction - t))) + 0.25 * Number(cut.handoverBytes) / Number(maxBytes) + 0.1 * (cut.tensors.length - 1),
  }));
  // Greedy by target, so the top N spread out instead of crowding the best target.
  const out: typeof scored = [];
  const left = [...scored];
  // A cut at the MAC share of one already taken, or with (nearly) no MACs on one side,
  // would make a stage that saves nothing: such cuts only follow in the tail.
  const useful = (c: Cut) => c.macFraction > 0.005 && c.macFraction < 0.995 && !out.some((o) => Math.abs(o.cut.macFraction - c.macFraction) < 1e-9);
  for (const t of targets) {
    let bi = -1, bs = Infinity;
    left.forEach((s, i) => {
      if (!useful(s.cut)) return;
      const v = Math.abs(s.cut.macFraction - t) + 0.25 * Number(s.cut.handoverBytes) / Number(maxBytes) + 0.1 * (s.cut.tensors.length - 1);
      if (v < bs - 1e-12 || (Math.abs(v - bs) <= 1e-12 && s.cut.step > left[bi].cut.step)) { bs = v; bi = i; }
    });
    if (bi < 0) break;
    out.push(left.splice(bi, 1)[0]);
  }
  left.sort((a, b) => a.score - b.score || a.cut.step - b.cut.step);
  return [...out, ...left];
}

/** Shapes completed (measured in onnxruntime where rules cannot type), then the plan. */
export async function scanModel(model: Model & { file?: string }, opts: InferOptions = {}): Promise<CutPlan> {
  return planCuts(model, await completeShapes(model, opts));
}

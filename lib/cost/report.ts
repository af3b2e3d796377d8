// The cost report: per node MACs/ops/params/output bytes, model totals, peak
// activation memory over the file's node order, and per-stage totals for cuts.
import type { Model, Node } from '../graph/ir.js';
import { findProduced, readsOf } from '../graph/links.js';
import { inferShapes, type InferOptions, type ShapeResult, type ShapeSource } from '../shapes/infer.js';
import { findRule } from '../ops/registry.js';
import { attrsOf } from '../ops/attrs.js';
import type { CostCtx } from '../ops/rule.js';
import { numel } from '../ops/rule.js';
import { bytesFor, dtypeName, INT8 } from '../onnx/dtype.js';
import { tensorDims, elementCount } from '../onnx/tensor.js';
import { concrete } from './concrete.js';
import { liveRanges, peakOver } from './memory.js';
import { planArena } from './arena.js';
import { ioView, qdqView } from './qdq.js';
import { OfframpError } from '../errors.js';

export interface TensorCost {
  name: string; shape: number[]; dtype: string;
  /** bytes as the value is held when the model runs (see `stored`) */
  bytes: bigint;
  source: ShapeSource;
  /** in a QDQ model: a float value held as 'int8' (inside a quantized kernel) or computed from weights alone ('weight', no activation bytes) */
  stored?: 'int8' | 'weight';
}
export interface NodeCost {
  index: number; name: string; op: string; domain: string;
  macs: bigint; ops: bigint; params: bigint; paramBytes: bigint;
  outputs: TensorCost[];
  /** no rule knows this op's arithmetic: its MACs are counted as 0 */
  uncosted?: boolean;
  /** its MACs run as int8 (a matrix op between DequantizeLinear and QuantizeLinear, or an integer kernel) */
  int8?: true;
}
export interface StageCost {
  index: number;
  /** steps [first, last] in the node order */
  first: number; last: number;
  /** value the stage ends at ('' for the last stage) */
  cut: string;
  macs: bigint; ops: bigint; macFraction: number; params: bigint; paramBytes: bigint;
  /** of `macs`, those running as int8 (QDQ models) */
  int8Macs: bigint;
  peakActivationBytes: bigint;
  /** the arena a plan of offsets needs for the same values (planArena): at least the peak */
  arenaBytes: bigint;
  inputs: { name: string; bytes: bigint }[];
  outputs: { name: string; bytes: bigint }[];
}
export interface CostReport {
  model: {
    file?: string; irVersion: number; opsets: Record<string, number>; producer: string;
    macs: bigint; ops: bigint; params: bigint; paramBytes: bigint; peakActivationBytes: bigint;
    /** the arena a plan of offsets needs over the whole order (planArena): at least the peak */
    arenaBytes: bigint;
    /** of `macs`, those running as int8 (QDQ models) */
    int8Macs: bigint;
    peakAt: string; peakLive: string[];
    paramBytesByType: Record<string, bigint>;
    inputs: TensorCost[]; outputs: TensorCost[];
  };
  nodes: NodeCost[];
  stages: StageCost[];
  shapes: { rule: number; declared: number; measured: string[]; noRule: Record<string, number> };
  warnings: string[];
}

export interface CostOptions extends InferOptions {
  /** Stage boundaries: value names (or node names, meaning the node's first output). */
  cuts?: string[];
  /** Stage boundaries as the last step of each stage but the last (instead of cuts), for a model whose file order is already staged. */
  stageEnds?: number[];
  /** Shapes already inferred (with measured values filled in). */
  shapes?: ShapeResult;
}

const WEIGHT_OPS = new Set(['Constant']);

export function costModel(model: Model & { file?: string }, opts: CostOptions = {}): CostReport {
  const g = model.graph;
  const shapes = opts.shapes ?? inferShapes(model, opts);
  const warnings: string[] = [];
  const where = (n: Node, i: number) => `node #${i} ${n.op}${n.name ? ` '${n.name}'` : ''}`;
  const qdq = qdqView(g, shapes.order);
  const tensorCost = (name: string, at: string): TensorCost => {
    const v = shapes.values.get(name);
    if (!v) throw new OfframpError('cost', `type of '${name}' is unknown`, model.file, at);
    const shape = concrete(v.type.shape, name, at);
    // In a QDQ model a float value inside an int8 kernel is held as int8; one computed from weights is a weight.
    const st = qdq?.weights.has(name) ? 'weight' : qdq?.alias.has(name) ? 'int8' : undefined;
    const bytes = st === 'weight' ? 0n : bytesFor(st === 'int8' ? INT8 : v.type.dtype, numel(shape));
    return { name, shape, dtype: dtypeName(v.type.dtype), bytes, source: v.source, ...(st && { stored: st }) };
  };

  // Weights: initializers and Constant outputs; a tensor shared by several nodes counts once (for its first reader).
  const weightOf = new Map<string, { count: bigint; bytes: bigint; dtype: number }>();
  for (const [name, t] of g.initializers) {
    const count = elementCount(tensorDims(t));
    weightOf.set(name, { count, bytes: bytesFor(t.dataType ?? 0, count), dtype: t.dataType ?? 0 });
  }
  const inputNames = new Set(g.inputs.map((v) => v.name));
  const seen = new Set<string>();
  const nodes: NodeCost[] = [];
  const sizes = new Map<string, bigint>();
  let macs = 0n, ops = 0n, params = 0n, paramBytes = 0n, int8Macs = 0n;
  const byType: Record<string, bigint> = {};
  const addWeight = (name: string, w: { count: bigint; bytes: bigint; dtype: number }) => {
    const k = dtypeName(w.dtype);
    byType[k] = (byType[k] ?? 0n) + w.bytes;
  };
  for (const i of shapes.order) {
    const n = g.nodes[i];
    const at = where(n, i);
    const outputs = n.outputs.filter(Boolean).map((o) => tensorCost(o, at));
    let np = 0n, npb = 0n;
    for (const r of readsOf(n)) {
      const w = weightOf.get(r);
      if (!w || seen.has(r) || (inputNames.has(r) && !g.initializers.has(r))) continue;
      seen.add(r); np += w.count; npb += w.bytes; addWeight(r, w);
    }
    if (WEIGHT_OPS.has(n.op)) {
      for (const o of outputs) {
        const v = shapes.values.get(o.name)!;
        const w = { count: numel(o.shape), bytes: o.bytes, dtype: v.type.dtype };
        weightOf.set(o.name, w); seen.add(o.name); np += w.count; npb += w.bytes; addWeight(o.name, w);
      }
    } else {
      for (const o of outputs) sizes.set(o.name, o.bytes);
    }
    const opset = model.opsets.get(n.domain) ?? 1;
    const rule = findRule(n.domain, n.op, opset);
    let c = { macs: 0n, ops: 0n };
    let uncosted = false;
    if (rule?.cost) {
      const ctx: CostCtx = {
        ...attrsOf(n.attrs), node: n, opset,
        inputs: n.inputs.map((x) => (x ? safeConcrete(shapes, x) : undefined)),
        inputTypes: n.inputs.map((x) => (x ? shapes.values.get(x)?.type.dtype : undefined)),
        outputs: outputs.map((o) => o.shape),
      };
      try { c = rule.cost(ctx); } catch (e) {
        throw new OfframpError('cost', `cannot cost: ${(e as Error).message}`, model.file, at);
      }
    } else if (!rule) {
      uncosted = true;
    }
    macs += c.macs; ops += c.ops; params += np; paramBytes += npb;
    const int8 = !!qdq?.int8Nodes.has(i);
    if (int8) int8Macs += c.macs;
    nodes.push({ index: i, name: n.name, op: n.op, domain: n.domain, macs: c.macs, ops: c.ops, params: np, paramBytes: npb, outputs, ...(uncosted && { uncosted }), ...(int8 && { int8: true as const }) });
  }
  const uncostedOps = [...new Set(nodes.filter((n) => n.uncosted).map((n) => n.op))];
  if (uncostedOps.length) warnings.push(`no cost rule for ${uncostedOps.join(', ')}: counted as 0 MACs`);

  const inputs = g.inputs.filter((v) => !g.initializers.has(v.name)).map((v) => tensorCost(v.name, `graph input '${v.name}'`));
  for (const t of inputs) sizes.set(t.name, t.bytes);
  const outputs = g.outputs.map((v) => tensorCost(v.name, `graph output '${v.name}'`));
  const ioNodes = ioView(g, shapes.order, qdq);
  const ranges = liveRanges(shapes.order, ioNodes, sizes, inputs.map((t) => t.name), outputs.map((t) => t.name));
  const last = shapes.order.length - 1;
  const peak = peakOver(ranges, 0, last);

  const stages = stageCosts(model, shapes.order, nodes, ranges, opts.stageEnds ? endsAsCuts(model, shapes.order, opts.stageEnds) : cutSteps(model, shapes.order, opts.cuts ?? []), macs, weightOf);
  const counts = { rule: 0, declared: 0 };
  const measured: string[] = [];
  for (const [name, v] of shapes.values) {
    if (v.source === 'rule') counts.rule++;
    else if (v.source === 'declared') counts.declared++;
    else if (v.source === 'measured') measured.push(name);
  }
  return {
    model: {
      file: model.file, irVersion: Number(model.irVersion), opsets: Object.fromEntries(model.opsets),
      producer: [model.proto.producerName, model.proto.producerVersion].filter(Boolean).join(' '),
      macs, ops, params, paramBytes, peakActivationBytes: peak.bytes, arenaBytes: planArena(ranges, { from: 0, to: last }).bytes, int8Macs,
      peakAt: peak.step >= 0 && last >= 0 ? nodeLabel(g.nodes[shapes.order[peak.step]], shapes.order[peak.step]) : '',
      peakLive: peak.live, paramBytesByType: byType, inputs, outputs,
    },
    nodes, stages,
    shapes: { ...counts, measured, noRule: Object.fromEntries(shapes.noRule) },
    warnings,
  };
}

const nodeLabel = (n: Node, i: number) => n.name || `#${i} ${n.op}`;

function safeConcrete(shapes: ShapeResult, name: string): number[] | undefined {
  const s = shapes.values.get(name)?.type.shape;
  return s && s.every((d) => typeof d === 'number') ? (s as number[]) : undefined;
}

/** Resolve cut names to steps: the step of the node producing the value (or named so). */
export function cutSteps(model: Model, order: number[], cuts: string[]): { name: string; step: number }[] {
  const g = model.graph;
  const stepOf = new Map(order.map((ni, s) => [ni, s]));
  const out = cuts.map((c) => {
    const v = findProduced(g, c);
    if (!v) throw new OfframpError('usage', `cut '${c}' names no value or node of the graph`);
    return { name: v.name, step: stepOf.get(v.node)! };
  });
  out.sort((a, b) => a.step - b.step);
  for (let i = 1; i < out.length; i++) if (out[i].step === out[i - 1].step) throw new OfframpError('usage', `cuts '${out[i - 1].name}' and '${out[i].name}' fall at the same place`);
  if (out.length && out[out.length - 1].step === order.length - 1) throw new OfframpError('usage', `cut '${out[out.length - 1].name}' is after the last node: that stage would be empty`);
  return out;
}

function endsAsCuts(model: Model, order: number[], ends: number[]): { name: string; step: number }[] {
  const sorted = [...ends].sort((a, b) => a - b);
  sorted.forEach((e, i) => {
    if (!Number.isInteger(e) || e < 0 || e >= order.length - 1 || (i && e === sorted[i - 1])) throw new OfframpError('usage', `stage end ${e} is not a step before the last (0…${order.length - 2}) or repeats`);
  });
  return sorted.map((step) => ({ name: model.graph.nodes[order[step]].outputs[0] ?? '', step }));
}

function stageCosts(
  model: Model, order: number[], nodes: NodeCost[], ranges: ReturnType<typeof liveRanges>, steps: { name: string; step: number }[], total: bigint,
  weightOf: Map<string, { count: bigint; bytes: bigint }>,
): StageCost[] {
  const bounds = [...steps.map((s) => s.step), order.length - 1];
  const stages: StageCost[] = [];
  let first = 0;
  bounds.forEach((last, k) => {
    const span = nodes.slice(first, last + 1);
    const sum = (f: (n: NodeCost) => bigint) => span.reduce((s, n) => s + f(n), 0n);
    const macs = sum((n) => n.macs);
    // A weight read in two stages is stored in both stage files, so each stage counts it.
    const weights = new Set(span.flatMap((n) => [...readsOf(model.graph.nodes[n.index]), ...(n.op === 'Constant' ? n.outputs.map((o) => o.name) : [])]).filter((r) => weightOf.has(r)));
    const w = [...weights].map((r) => weightOf.get(r)!);
    // Handover: values live across a boundary (born before it, read after it).
    const crossing = (b: number) => ranges.filter((v) => v.birth <= b && v.death > b).map((v) => ({ name: v.name, bytes: v.bytes }));
    stages.push({
      index: k, first, last, cut: k < steps.length ? steps[k].name : '',
      macs, ops: sum((n) => n.ops), macFraction: total ? Number((macs * 1000000n) / total) / 1e6 : 0,
      params: w.reduce((a, x) => a + x.count, 0n), paramBytes: w.reduce((a, x) => a + x.bytes, 0n),
      int8Macs: sum((n) => (n.int8 ? n.macs : 0n)),
      peakActivationBytes: peakOver(ranges, first, last).bytes,
      arenaBytes: planArena(ranges, { from: first, to: last }).bytes,
      inputs: first === 0 ? ranges.filter((v) => v.birth < 0).map((v) => ({ name: v.name, bytes: v.bytes })) : crossing(first - 1),
      outputs: k < steps.length ? crossing(last) : ranges.filter((v) => v.death === order.length - 1 && model.graph.outputs.some((o) => o.name === v.name)).map((v) => ({ name: v.name, bytes: v.bytes })),
    });
    first = last + 1;
  });
  return stages;
}

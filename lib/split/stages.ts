// Stages from cuts: which nodes, weights, inputs and outputs each stage has, and
// the stage graph itself. A stage reads only graph inputs, its own values, weights
// (copied into it) and values earlier stages hand out.
import type { Graph, Model, Node, TensorType, ValueInfo } from '../graph/ir.js';
import { readsOf } from '../graph/links.js';
import { liveRanges, peakOver } from '../cost/memory.js';
import { tensorByteSize } from '../onnx/tensor.js';
import { isConstantNode } from '../cuts/order.js';
import { crossingAt, type Cut, type CutPlan } from '../cuts/scan.js';
import { OfframpError } from '../errors.js';

export interface StagePlan {
  index: number;
  /** steps [first, last] of the plan's order */
  first: number; last: number;
  /** node indices run by the stage: copied Constant nodes first, then its steps */
  nodes: number[];
  /** initializers the stage reads (bodies included), in file order */
  initializers: string[];
  inputs: { name: string; from: 'input' | number }[];
  outputs: { name: string; to: number[]; modelOutput: boolean }[];
  /** exit outputs made in this stage */
  exits: string[];
  /** tensors crossing the boundary after it (none for the last stage) */
  cut: string[];
  macs: bigint;
  weightBytes: bigint;
  peakActivationBytes: bigint;
  handoverBytes: bigint;
}

/** Stage layout for cuts (any order; equal boundaries are an error). */
export function planStages(plan: CutPlan, cuts: Cut[]): StagePlan[] {
  const g = plan.model.graph;
  const sorted = [...cuts].sort((a, b) => a.step - b.step);
  for (let i = 1; i < sorted.length; i++) {
    if (sorted[i].step === sorted[i - 1].step) throw new OfframpError('usage', `cuts ${label(sorted[i - 1])} and ${label(sorted[i])} are the same boundary`, plan.model.file);
  }
  const bounds = [...sorted.map((c) => c.step), plan.steps.length - 1];
  const constantOf = new Map<string, number>();
  g.nodes.forEach((n, i) => { if (isConstantNode(n)) for (const o of n.outputs) constantOf.set(o, i); });
  const bytesOf = new Map(plan.ranges.map((r) => [r.name, r.bytes]));
  const graphInputs = new Set(g.inputs.map((v) => v.name).filter((n) => !g.initializers.has(n)));
  const graphOutputs = g.outputs.map((o) => o.name);
  const madeBy = new Map<string, number>();
  const ioNodes = g.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));

  let first = 0;
  const stages: StagePlan[] = bounds.map((last, k) => {
    const steps = plan.steps.slice(first, last + 1);
    const made = new Set(steps.flatMap((i) => g.nodes[i].outputs.filter(Boolean)));
    for (const v of made) madeBy.set(v, k);
    const reads = [...new Set(steps.flatMap((i) => readsOf(g.nodes[i])))];
    // A model output that is a weight has no producing step: the last stage hands it out.
    const weightOuts = k === bounds.length - 1 ? graphOutputs.filter((o) => g.initializers.has(o) || constantOf.has(o)) : [];
    const wanted = new Set([...reads, ...weightOuts]);
    const constants = [...new Set([...wanted].filter((r) => constantOf.has(r)).map((r) => constantOf.get(r)!))].sort((a, b) => a - b);
    const initializers = [...g.initializers.keys()].filter((n) => wanted.has(n));
    const inputs = reads.filter((r) => !made.has(r) && !g.initializers.has(r) && !constantOf.has(r)).map((name) => {
      if (graphInputs.has(name)) return { name, from: 'input' as const };
      const from = madeBy.get(name);
      if (from === undefined) throw new OfframpError('graph', `stage ${k} reads '${name}', which no earlier stage makes`, plan.model.file);
      return { name, from };
    });
    const weightBytes = [...initializers.map((n) => tensorByteSize(g.initializers.get(n)!)),
      ...constants.map((i) => constBytes(g.nodes[i]))].reduce((a, b) => a + b, 0n);
    const cut = k < sorted.length ? crossingAt(plan, last) : [];
    const stage: StagePlan = {
      index: k, first, last, nodes: [...constants, ...steps], initializers, inputs, outputs: [],
      exits: graphOutputs.filter((o) => made.has(o) && plan.exits.includes(o)),
      cut, macs: plan.macs.slice(first, last + 1).reduce((a, b) => a + b, 0n), weightBytes, peakActivationBytes: 0n,
      handoverBytes: cut.reduce((a, n) => a + (bytesOf.get(n) ?? 0n), 0n),
    };
    for (const o of weightOuts) made.add(o);
    first = last + 1;
    return stage;
  });

  // Outputs: what later stages read, then the model outputs made here, in graph order.
  stages.forEach((s, k) => {
    const made = new Set(s.nodes.flatMap((i) => g.nodes[i].outputs.filter(Boolean)));
    if (k === stages.length - 1) for (const o of graphOutputs) if (g.initializers.has(o)) made.add(o);
    const handed = new Map<string, number[]>();
    for (const later of stages.slice(k + 1)) for (const i of later.inputs) if (i.from === k) {
      let l = handed.get(i.name); if (!l) handed.set(i.name, (l = [])); l.push(later.index);
    }
    const order = [...s.cut.filter((n) => handed.has(n)), ...[...handed.keys()].filter((n) => !s.cut.includes(n))];
    s.outputs = order.map((name) => ({ name, to: handed.get(name)!, modelOutput: graphOutputs.includes(name) }));
    for (const o of graphOutputs) if (made.has(o) && !handed.has(o) && (madeBy.get(o) === k || (!madeBy.has(o) && k === stages.length - 1))) {
      s.outputs.push({ name: o, to: [], modelOutput: true });
    }
    const steps = plan.steps.slice(s.first, s.last + 1);
    const ranges = liveRanges(steps, ioNodes, bytesOf, s.inputs.map((i) => i.name), s.outputs.map((o) => o.name));
    s.peakActivationBytes = peakOver(ranges, 0, steps.length - 1).bytes;
  });
  return stages;
}

const label = (c: Cut) => `'${c.tensors.map((t) => t.name).join('+')}'`;

function constBytes(n: Node): bigint {
  const v = n.attrs.get('value')?.t;
  return v ? tensorByteSize(v) : 0n;
}

/**
 * The stage graph: a plain graph → graph function. Original graph inputs keep
 * their declarations; handover values get the full planned type; names are kept.
 */
export function stageGraph(g: Graph, s: StagePlan, typeOf: (name: string) => TensorType | undefined): Graph {
  const declared = new Map<string, ValueInfo>([...g.valueInfo, ...g.outputs.map((o) => [o.name, o] as const), ...g.inputs.map((v) => [v.name, v] as const)]);
  const vi = (name: string, keepDeclared: boolean): ValueInfo => {
    const d = declared.get(name);
    if (d && keepDeclared && d.type?.shape) return d;
    const type = typeOf(name) ?? d?.type;
    return { name, ...(type && { type: { dtype: type.dtype, shape: type.shape && [...type.shape] } }), proto: { ...(d?.proto ?? {}), name } };
  };
  const inputNames = new Set(g.inputs.map((v) => v.name));
  const outputNames = new Set(g.outputs.map((v) => v.name));
  const ioNames = new Set([...s.inputs.map((i) => i.name), ...s.outputs.map((o) => o.name)]);
  const made = new Set(s.nodes.flatMap((i) => g.nodes[i].outputs));
  const keep = new Set([...made, ...ioNames, ...s.initializers]);
  const quant = g.proto.quantizationAnnotation?.filter((a) => keep.has(a.tensorName ?? ''));
  return {
    name: `${g.name || 'graph'}_stage${s.index}`,
    nodes: s.nodes.map((i) => g.nodes[i]),
    inputs: s.inputs.map((i) => vi(i.name, inputNames.has(i.name))),
    outputs: s.outputs.map((o) => vi(o.name, outputNames.has(o.name))),
    initializers: new Map(s.initializers.map((n) => [n, g.initializers.get(n)!])),
    valueInfo: new Map([...g.valueInfo].filter(([n]) => made.has(n) && !ioNames.has(n))),
    proto: { ...g.proto, quantizationAnnotation: quant?.length ? quant : undefined, sparseInitializer: undefined },
  };
}

/** A stage model: the source's opsets, functions and metadata (the exit table stays with the source). */
export function stageModel(m: Model, graph: Graph, s: StagePlan, count: number): Model {
  const meta = (m.proto.metadataProps ?? []).filter((p) => p.key !== 'offramp.exits' && p.key !== 'offramp.stage');
  const proto = { ...m.proto, metadataProps: [...meta, { key: 'offramp.stage', value: `${s.index}/${count}` }] };
  delete proto.trainingInfo;
  return { irVersion: m.irVersion, opsets: new Map(m.opsets), graph, proto };
}

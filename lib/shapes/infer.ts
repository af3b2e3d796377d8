// Static shape inference: walk the graph in topological order and apply each
// node's rule. Values a rule cannot type fall back to shapes declared in the file;
// whatever is still unknown is for `measureShapes` (onnxruntime) to fill in.
import type { Dim, Graph, Model, TensorType } from '../graph/ir.js';
import { linkGraph, topoOrder, describe } from '../graph/links.js';
import { findRule } from '../ops/registry.js';
import { attrsOf } from '../ops/attrs.js';
import { constFromTensor, type Known, type InferCtx, type Const } from '../ops/rule.js';
import { tensorDims } from '../onnx/tensor.js';
import '../ops/all.js';

export type ShapeSource = 'input' | 'initializer' | 'rule' | 'declared' | 'measured';
export interface ValueShape extends Known { source: ShapeSource }

export interface ShapeResult {
  values: Map<string, ValueShape>;
  /** node index order used */
  order: number[];
  /** node outputs with no type after rules and declarations */
  unknown: string[];
  /** ops that had no rule, with counts */
  noRule: Map<string, number>;
  /** rule failures (a rule that threw), by node */
  failures: { node: string; message: string }[];
}

export interface InferOptions {
  /** bindings of symbolic dims, e.g. { batch: 4 } */
  dims?: Record<string, number>;
  /** the first dim of a graph input, if symbolic and unbound, binds to this (default 1) */
  batch?: number;
  /** ignore shapes declared in value_info (conformance tests check the rules alone) */
  rulesOnly?: boolean;
  /** values of graph inputs known ahead (small integer tensors: shapes, axes, sizes), so shape arithmetic folds through them */
  inputValues?: Map<string, Const>;
}

export function bindInput(t: TensorType | undefined, opts: InferOptions): TensorType | undefined {
  if (!t?.shape) return t;
  return {
    dtype: t.dtype,
    shape: t.shape.map((d, i): Dim => {
      if (typeof d === 'number') return d;
      if (opts.dims && d in opts.dims) return opts.dims[d];
      if (i === 0 && opts.batch !== 0) return opts.batch ?? 1;
      return d;
    }),
  };
}

export function inferShapes(model: Model, opts: InferOptions = {}, graph: Graph = model.graph, outer?: Map<string, ValueShape>): ShapeResult {
  const values = new Map<string, ValueShape>(outer);
  for (const [name, t] of graph.initializers) {
    // Values are read lazily: only shape arithmetic asks, and converting every weight would cost memory.
    let cached: Const | undefined | null = null;
    values.set(name, {
      type: { dtype: t.dataType ?? 0, shape: tensorDims(t) }, source: 'initializer',
      get value() { if (cached === null) cached = constFromTensor(t); return cached; },
    });
  }
  for (const v of graph.inputs) {
    if (graph.initializers.has(v.name)) continue; // an input with a default: the initializer's shape rules
    const t = bindInput(v.type, opts);
    const known = opts.inputValues?.get(v.name);
    if (known) values.set(v.name, { type: { dtype: known.dtype, shape: known.dims }, value: known, source: 'input' });
    else if (t) values.set(v.name, { type: t, source: 'input' });
  }
  const declared = new Map<string, TensorType>();
  if (!opts.rulesOnly) {
    for (const v of [...graph.valueInfo.values(), ...graph.outputs]) if (v.type) declared.set(v.name, bindInput(v.type, { ...opts, batch: 0 })!);
  }
  const links = linkGraph(graph);
  const order = topoOrder(graph, links, new Set(outer?.keys()));
  const noRule = new Map<string, number>();
  const failures: ShapeResult['failures'] = [];
  let freshId = 0;
  for (const i of order) {
    const node = graph.nodes[i];
    const opset = model.opsets.get(node.domain) ?? (node.domain === '' ? model.opsets.get('') ?? 1 : 1);
    const rule = findRule(node.domain, node.op, opset);
    let outs: (Known | undefined)[] = [];
    if (!rule) noRule.set(node.op, (noRule.get(node.op) ?? 0) + 1);
    else {
      const ctx: InferCtx = {
        ...attrsOf(node.attrs), node, opset, arity: node.inputs.length,
        inputs: node.inputs.map((n) => (n ? values.get(n) : undefined)),
        fresh: (hint) => `${hint}#${freshId++}`,
      };
      try { outs = rule.infer(ctx); } catch (e) {
        failures.push({ node: describe(graph, i), message: (e as Error).message });
        outs = [];
      }
    }
    node.outputs.forEach((o, k) => {
      if (!o) return;
      const got = outs[k];
      if (got) values.set(o, { ...got, source: 'rule' });
      else if (declared.has(o)) values.set(o, { type: declared.get(o)!, source: 'declared' });
    });
  }
  const unknown = graph.nodes.flatMap((n) => n.outputs).filter((o) => o && !values.get(o)?.type.shape);
  return { values, order, unknown, noRule, failures };
}

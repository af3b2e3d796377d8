// Head subgraphs as plain node and initializer protos, appended to a graph copy:
// the feature path (optional 1×1 projection + Relu, then pooling) and the
// classifier layers (Gemm, Relu between). Names are fresh against the whole graph.
import type { AttributeProto, NodeProto, TensorProto } from '../onnx/types.js';
import { AttrType } from '../onnx/types.js';
import { FLOAT, INT64 } from '../onnx/dtype.js';
import type { Model } from '../graph/ir.js';
import type { Axes } from './spec.js';

export interface Emitter { nodes: NodeProto[]; inits: TensorProto[]; opset: number; fresh(base: string): string; nodeName(base: string): string; node(op: string, inputs: string[], base: string, attrs?: AttributeProto[]): string }

export function emitter(model: Model): Emitter {
  const g = model.graph;
  const taken = new Set<string>([...g.inputs.map((v) => v.name), ...g.outputs.map((v) => v.name), ...g.initializers.keys(), ...g.valueInfo.keys(), ...g.nodes.flatMap((n) => n.outputs)]);
  const nodeNames = new Set(g.nodes.map((n) => n.name));
  const pick = (base: string, set: Set<string>) => { let n = base, k = 1; while (set.has(n)) n = `${base}_${k++}`; set.add(n); return n; };
  const e: Emitter = {
    nodes: [], inits: [], opset: model.opsets.get('') ?? 1,
    fresh: (base) => pick(base, taken),
    nodeName: (base) => pick(base, nodeNames),
    node(op, inputs, base, attrs = []) {
      const out = e.fresh(`${base}_out`);
      e.nodes.push({ opType: op, input: inputs, output: [out], name: pick(base, nodeNames), ...(attrs.length && { attribute: attrs }) });
      return out;
    },
  };
  return e;
}

export const intsAttr = (name: string, v: readonly number[]): AttributeProto => ({ name, type: AttrType.INTS, ints: BigInt64Array.from(v, (x) => BigInt(x)) });
export const intAttr = (name: string, v: number): AttributeProto => ({ name, type: AttrType.INT, i: BigInt(v) });

const bytesOf = (a: Float32Array | BigInt64Array) => new Uint8Array(a.buffer.slice(a.byteOffset, a.byteOffset + a.byteLength));
export function addInit(e: Emitter, base: string, dims: readonly number[], data: Float32Array | BigInt64Array): string {
  const name = e.fresh(base);
  e.inits.push({ name, dims: BigInt64Array.from(dims, (d) => BigInt(d)), dataType: data instanceof Float32Array ? FLOAT : INT64, rawData: bytesOf(data) });
  return name;
}

/** A dense layer out×in, row-major weights (what Gemm with transB=1 reads). */
export interface Dense { out: number; in: number; W: Float32Array; b: Float32Array }

/** The 1×1 projection of a conv head: `out` channels from `in`, applied at every position. */
function project(e: Emitter, x: string, axes: Axes, rank: number, p: Dense, prefix: string): string {
  const w = `${prefix}.proj`;
  if (axes.layout === 'NC') {
    return e.node('Relu', [e.node('Gemm', [x, addInit(e, `${w}.weight`, [p.out, p.in], p.W), addInit(e, `${w}.bias`, [p.out], p.b)], `${prefix}/proj`, [intAttr('transB', 1)])], `${prefix}/proj_relu`);
  }
  if (axes.channel === 1) {
    const ones = new Array(rank - 2).fill(1);
    const y = e.node('Conv', [x, addInit(e, `${w}.weight`, [p.out, p.in, ...ones], p.W), addInit(e, `${w}.bias`, [p.out], p.b)], `${prefix}/proj`, [intsAttr('kernel_shape', ones)]);
    return e.node('Relu', [y], `${prefix}/proj_relu`);
  }
  // Channels last: the 1×1 convolution is a MatMul over the last axis.
  const wt = new Float32Array(p.in * p.out);
  for (let o = 0; o < p.out; o++) for (let i = 0; i < p.in; i++) wt[i * p.out + o] = p.W[o * p.in + i];
  const y = e.node('MatMul', [x, addInit(e, `${w}.weight`, [p.in, p.out], wt)], `${prefix}/proj`);
  return e.node('Relu', [e.node('Add', [y, addInit(e, `${w}.bias`, [p.out], p.b)], `${prefix}/proj_bias`)], `${prefix}/proj_relu`);
}

/**
 * Pool a cut tensor down to [N, features]: the head's input. Rank-2 tensors pass through. With `grid`
 * (channels first only), average pooling over windows of that size (the last window of an axis may be
 * partial: ceil_mode, padding not counted), flattened channel-major.
 */
export function emitFeatures(e: Emitter, cut: string, axes: Axes, rank: number, proj: Dense | undefined, prefix: string, grid?: number[]): string {
  let x = proj ? project(e, cut, axes, rank, proj, prefix) : cut;
  if (!axes.pool.length) return x;
  if (grid) {
    x = e.node('AveragePool', [x], `${prefix}/pool`, [intsAttr('kernel_shape', grid), intsAttr('strides', grid), intAttr('ceil_mode', 1)]);
    return e.node('Flatten', [x], `${prefix}/flatten`, [intAttr('axis', 1)]);
  }
  if (axes.channel === 1) {
    x = e.node('GlobalAveragePool', [x], `${prefix}/pool`);
    return e.node('Flatten', [x], `${prefix}/flatten`, [intAttr('axis', 1)]);
  }
  // ReduceMean takes its axes as an input from opset 18, as an attribute before.
  const keep = intAttr('keepdims', 0);
  return e.opset >= 18
    ? e.node('ReduceMean', [x, addInit(e, `${prefix}.pool_axes`, [axes.pool.length], BigInt64Array.from(axes.pool, BigInt))], `${prefix}/pool`, [keep])
    : e.node('ReduceMean', [x], `${prefix}/pool`, [intsAttr('axes', axes.pool), keep]);
}

/** Gemm layers with Relu between; the last writes `output`. */
export function emitClassifier(e: Emitter, features: string, layers: Dense[], output: string, prefix: string): void {
  let x = features;
  layers.forEach((l, i) => {
    const last = i === layers.length - 1, base = `${prefix}/fc${layers.length > 1 ? i : ''}`;
    const ins = [x, addInit(e, `${prefix}.fc${layers.length > 1 ? i : ''}.weight`, [l.out, l.in], l.W), addInit(e, `${prefix}.fc${layers.length > 1 ? i : ''}.bias`, [l.out], l.b)];
    if (last) e.nodes.push({ opType: 'Gemm', input: ins, output: [output], name: e.nodeName(base), attribute: [intAttr('transB', 1)] });
    else x = e.node('Relu', [e.node('Gemm', ins, base, [intAttr('transB', 1)])], `${base}_relu`);
  });
}

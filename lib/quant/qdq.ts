// The QDQ pass: a float stage model → the same computation with int8 boundaries
// written as QuantizeLinear/DequantizeLinear pairs (the open form MCU compilers
// and onnxruntime fuse into integer kernels). Which values get a pair, and which
// share their input's parameters, is decided by `activationPlan`; `toQdq` rewrites.
import type { Model, Node, ValueInfo } from '../graph/ir.js';
import { nodeFromProto } from '../graph/ir.js';
import { readsOf } from '../graph/links.js';
import type { TensorProto } from '../onnx/types.js';
import { FLOAT, INT8, INT32 } from '../onnx/dtype.js';
import { tensorDims } from '../onnx/tensor.js';
import type { ShapeResult } from '../shapes/infer.js';
import { OfframpError } from '../errors.js';
import { floatValues, floatTensor } from './fold-bn.js';
import { quantizeBias, quantizeWeights } from './linear.js';

export interface ActParams { scale: number; zeroPoint: number }

/** Ops whose output holds input values only (rearranged or selected): it keeps the input's int8 parameters, so the integer op is exact. */
const PASS_THROUGH = new Set(['MaxPool', 'Reshape', 'Flatten', 'Transpose', 'Squeeze', 'Unsqueeze', 'Identity', 'Dropout']);
/** Producers an integer kernel fuses with a following Relu (common practice): no int8 boundary between them. */
const FUSES_RELU = new Set(['Conv', 'Gemm', 'MatMul', 'Add']);
export const QDQ_OPS = new Set(['QuantizeLinear', 'DequantizeLinear', 'DynamicQuantizeLinear', 'QLinearConv', 'QLinearMatMul', 'ConvInteger', 'MatMulInteger']);

export interface ActivationPlan {
  /** float32 values that get an int8 boundary, in file order (graph inputs first) */
  values: string[];
  /** value → the value whose parameters it takes (pass-through ops); roots map to themselves */
  root: Map<string, string>;
}

/** Which float32 activations of a stage get a Q/DQ pair. */
export function activationPlan(model: Model, shapes: ShapeResult): ActivationPlan {
  const g = model.graph;
  const isFloat = (v: string) => shapes.values.get(v)?.type.dtype === FLOAT;
  const consumers = new Map<string, Node[]>();
  for (const n of g.nodes) for (const r of readsOf(n)) { let l = consumers.get(r); if (!l) consumers.set(r, (l = [])); l.push(n); }
  const outputs = new Set(g.outputs.map((o) => o.name));
  const constant = new Set([...g.initializers.keys()]);
  const values: string[] = [], root = new Map<string, string>();
  for (const v of g.inputs) if (!g.initializers.has(v.name) && isFloat(v.name)) { values.push(v.name); root.set(v.name, v.name); }
  for (const i of shapes.order) {
    const n = g.nodes[i];
    const ins = n.inputs.filter(Boolean);
    // Constant subgraphs (shape arithmetic, Constant nodes) are weights, not activations.
    if (n.op === 'Constant' || (ins.length && ins.every((x) => constant.has(x)))) { n.outputs.forEach((o) => constant.add(o)); continue; }
    n.outputs.forEach((o, k) => {
      if (!o || !isFloat(o)) return;
      const c = consumers.get(o) ?? [];
      if (!n.domain && FUSES_RELU.has(n.op) && !outputs.has(o) && c.length === 1 && c[0].op === 'Relu' && !c[0].domain) return;
      values.push(o);
      const src = n.inputs[0];
      root.set(o, k === 0 && !n.domain && PASS_THROUGH.has(n.op) && src && root.has(src) ? root.get(src)! : o);
    });
  }
  return { values, root };
}

export interface QdqSpec {
  /** int8 parameters of every value in the plan (by name; shared values included) */
  params: Map<string, ActParams>;
  plan: ActivationPlan;
  /** stage inputs that arrive as int8 (handover from an earlier stage) */
  int8Inputs: Set<string>;
  /** stage outputs that leave as int8 (handover to a later stage) */
  int8Outputs: Set<string>;
}

export interface QdqResult { model: Model; weights: number; biases: number }

/** Weight input and its per-output-channel axis for the matrix ops, if `n` has one. */
function weightAxis(n: Node, rank: number): number | undefined {
  if (n.domain) return undefined;
  if (n.op === 'Conv') return rank >= 3 ? 0 : undefined;
  if (n.op === 'Gemm') return rank === 2 ? (Number(n.attrs.get('transB')?.i ?? 0n) === 1 ? 0 : 1) : undefined;
  if (n.op === 'MatMul') return rank >= 2 ? rank - 1 : undefined;
  return undefined;
}

const scalarF = (name: string, v: number): TensorProto => floatTensor(name, [], Float32Array.of(v));
const typed = (name: string, dtype: number, dims: readonly number[], bytes: Uint8Array): TensorProto =>
  ({ name, dataType: dtype, dims: BigInt64Array.from(dims, (d) => BigInt(d)), rawData: bytes });
const bytesOf = (a: ArrayBufferView) => new Uint8Array(a.buffer, a.byteOffset, a.byteLength);

export function toQdq(model: Model, spec: QdqSpec): QdqResult {
  const opset = model.opsets.get('') ?? 0;
  if (opset < 13) throw new OfframpError('graph', `opset ${opset}: per-channel QuantizeLinear/DequantizeLinear need opset 13 or later`);
  const g = model.graph;
  const used = new Set<string>([...g.initializers.keys(), ...g.inputs.map((v) => v.name), ...g.nodes.flatMap((n) => n.outputs), ...g.valueInfo.keys()]);
  const fresh = (base: string) => { let n = base; for (let k = 1; used.has(n); k++) n = `${base}_${k}`; used.add(n); return n; };
  const inits = new Map(g.initializers);
  const node = (op: string, inputs: string[], outputs: string[], attrs: Record<string, number> = {}): Node => nodeFromProto({
    opType: op, input: inputs, output: outputs, name: fresh(`${outputs[0]}/${op}`),
    ...(Object.keys(attrs).length && { attribute: Object.entries(attrs).map(([name, i]) => ({ name, type: 2, i: BigInt(i) })) }),
  });
  const { params, plan } = spec;
  const outputs = new Set(g.outputs.map((o) => o.name));
  // One scale and zero point initializer per parameter root.
  const qp = new Map<string, [string, string]>();
  const paramsOf = (v: string): [string, string] => {
    const r = plan.root.get(v) ?? v;
    let got = qp.get(r);
    if (!got) {
      const p = params.get(r) ?? params.get(v);
      if (!p) throw new OfframpError('graph', `no calibrated range for '${v}'`);
      got = [fresh(`${r}/scale`), fresh(`${r}/zero_point`)];
      inits.set(got[0], scalarF(got[0], p.scale));
      inits.set(got[1], typed(got[1], INT8, [], bytesOf(Int8Array.of(p.zeroPoint))));
      qp.set(r, got);
    }
    return got;
  };

  const rewire = new Map<string, string>();   // consumers of a value read this name instead
  const rename = new Map<Node, Map<string, string>>();   // producer output renames
  const after = new Map<Node, Node[]>();      // Q/DQ nodes placed right after a producer
  const head: Node[] = [];                    // Q/DQ of stage inputs and weight DQs, first in the file
  const producer = new Map<string, Node>();
  for (const n of g.nodes) for (const o of n.outputs) if (o) producer.set(o, n);
  const planned = new Set(plan.values);

  for (const v of plan.values) {
    const [s, z] = paramsOf(v);
    const p = producer.get(v);
    const place = (nodes: Node[]) => { if (p) after.set(p, [...(after.get(p) ?? []), ...nodes]); else head.push(...nodes); };
    if (!p && spec.int8Inputs.has(v)) {
      const dq = fresh(`${v}/dq`);
      head.push(node('DequantizeLinear', [v, s, z], [dq]));
      rewire.set(v, dq);
    } else if (p && spec.int8Outputs.has(v)) {
      const f = fresh(`${v}/float`), dq = fresh(`${v}/dq`);
      setRename(rename, p, v, f);
      place([node('QuantizeLinear', [f, s, z], [v]), node('DequantizeLinear', [v, s, z], [dq])]);
      rewire.set(v, dq);
    } else if (p && outputs.has(v)) {
      const f = fresh(`${v}/float`), q = fresh(`${v}/int8`);
      setRename(rename, p, v, f);
      place([node('QuantizeLinear', [f, s, z], [q]), node('DequantizeLinear', [q, s, z], [v])]);
    } else {
      const q = fresh(`${v}/int8`), dq = fresh(`${v}/dq`);
      place([node('QuantizeLinear', [v, s, z], [q]), node('DequantizeLinear', [q, s, z], [dq])]);
      rewire.set(v, dq);
    }
  }

  // Weights int8 per output channel, biases int32 at s_x·s_w; a weight read by another node stays float for it.
  const readers = new Map<string, number>();
  for (const n of g.nodes) for (const r of readsOf(n)) readers.set(r, (readers.get(r) ?? 0) + 1);
  const weightIn = new Map<Node, string[]>();
  let weights = 0, biases = 0;
  for (const n of g.nodes) {
    const wName = n.inputs[1], wT = wName ? inits.get(wName) : undefined;
    if (!wT || !g.initializers.has(wName) || readers.get(wName) !== 1 || outputs.has(wName)) continue;
    const dims = tensorDims(wT), axis = weightAxis(n, dims.length), w = floatValues(wT);
    if (axis === undefined || !w) continue;
    const { q, params: wp } = quantizeWeights(w, dims, axis);
    const [wq, ws, wz, wdq] = [fresh(`${wName}/int8`), fresh(`${wName}/scale`), fresh(`${wName}/zero_point`), fresh(`${wName}/dq`)];
    inits.delete(wName);
    inits.set(wq, typed(wq, INT8, dims, bytesOf(q)));
    inits.set(ws, floatTensor(ws, [wp.scale.length], wp.scale));
    inits.set(wz, typed(wz, INT8, [wp.scale.length], new Uint8Array(wp.scale.length)));
    head.push(node('DequantizeLinear', [wq, ws, wz], [wdq], { axis }));
    const ins = [...n.inputs];
    ins[1] = wdq;
    weights++;
    // The bias: Conv's and Gemm's third input (Gemm only as plain y = A·B + C), 1-D over the output channels.
    const bName = n.inputs[2], bT = bName ? inits.get(bName) : undefined, x = n.inputs[0];
    const plainGemm = n.op !== 'Gemm' || ((n.attrs.get('alpha')?.f ?? 1) === 1 && (n.attrs.get('beta')?.f ?? 1) === 1);
    const b = bT && g.initializers.has(bName) && readers.get(bName) === 1 ? floatValues(bT) : undefined;
    const xp = x && planned.has(x) ? params.get(plan.root.get(x) ?? x) ?? params.get(x) : undefined;
    if (b && xp && plainGemm && tensorDims(bT!).length === 1 && b.length === wp.scale.length && (n.op === 'Conv' || n.op === 'Gemm')) {
      const bq = quantizeBias(b, xp.scale, wp.scale);
      const [bi, bs, bdq] = [fresh(`${bName}/int32`), fresh(`${bName}/scale`), fresh(`${bName}/dq`)];
      inits.delete(bName);
      inits.set(bi, typed(bi, INT32, [b.length], bytesOf(bq.q)));
      // The bias scale is not stored: the graph says it is s_x·s_w (a float32 Mul, as quantizeBias computes it).
      head.push(node('Mul', [paramsOf(x)[0], ws], [bs]), node('DequantizeLinear', [bi, bs], [bdq], { axis: 0 }));
      ins[2] = bdq;
      biases++;
    }
    weightIn.set(n, ins);
  }

  const nodes: Node[] = [...head];
  for (const n of g.nodes) {
    const ins = (weightIn.get(n) ?? n.inputs).map((x) => (x && rewire.has(x) ? rewire.get(x)! : x));
    if (n.captures.some((c) => rewire.has(c))) throw new OfframpError('graph', `node '${n.name || n.op}' reads a quantized value inside a subgraph: not supported`);
    const ren = rename.get(n);
    nodes.push({ ...n, inputs: ins, outputs: ren ? n.outputs.map((o) => ren.get(o) ?? o) : n.outputs });
    nodes.push(...(after.get(n) ?? []));
  }
  const retype = (v: ValueInfo, int8: boolean): ValueInfo => (int8 && v.type ? { ...v, type: { dtype: INT8, shape: v.type.shape && [...v.type.shape] } } : v);
  const valueInfo = new Map([...g.valueInfo].filter(([n]) => !spec.int8Outputs.has(n) && !spec.int8Inputs.has(n)));
  return {
    model: {
      ...model,
      graph: {
        ...g, nodes, initializers: inits, valueInfo,
        inputs: g.inputs.map((v) => retype(v, spec.int8Inputs.has(v.name))),
        outputs: g.outputs.map((v) => retype(v, spec.int8Outputs.has(v.name))),
      },
    },
    weights, biases,
  };
}

function setRename(m: Map<Node, Map<string, string>>, n: Node, from: string, to: string): void {
  let r = m.get(n); if (!r) m.set(n, (r = new Map())); r.set(from, to);
}

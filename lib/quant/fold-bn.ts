// BatchNormalization folded into the Conv before it (inference form, common
// practice before quantizing): y = γ·(conv(x) − μ)/√(σ² + ε) + β is a conv with
// W'[c] = W[c]·k[c] and b'[c] = (b[c] − μ[c])·k[c] + β[c], k = γ/√(σ² + ε).
// Computed in float64, stored as float32. A plain Model → Model pass.
import type { Model, Node } from '../graph/ir.js';
import type { TensorProto } from '../onnx/types.js';
import { FLOAT } from '../onnx/dtype.js';
import { tensorDims } from '../onnx/tensor.js';
import { readsOf } from '../graph/links.js';

/** Float32 values of a float32 initializer (raw_data or float_data). */
export function floatValues(t: TensorProto): Float32Array | undefined {
  if (t.dataType !== FLOAT || t.dataLocation === 1) return undefined;
  const n = tensorDims(t).reduce((a, b) => a * b, 1);
  if (t.rawData?.length) return new Float32Array(Uint8Array.from(t.rawData).buffer, 0, n);
  return t.floatData && t.floatData.length === n ? Float32Array.from(t.floatData) : undefined;
}

export const floatTensor = (name: string, dims: readonly number[], v: Float32Array): TensorProto => ({
  name, dataType: FLOAT, dims: BigInt64Array.from(dims, (d) => BigInt(d)), rawData: new Uint8Array(v.buffer, v.byteOffset, v.byteLength),
});

export interface FoldResult { model: Model; folded: number }

export function foldBatchNorm(model: Model): FoldResult {
  const g = model.graph;
  const readers = new Map<string, number>();
  for (const n of g.nodes) for (const r of readsOf(n)) readers.set(r, (readers.get(r) ?? 0) + 1);
  const outputs = new Set(g.outputs.map((o) => o.name));
  const producer = new Map<string, Node>();
  for (const n of g.nodes) for (const o of n.outputs) if (o) producer.set(o, n);
  const inits = new Map(g.initializers);
  const replaced = new Map<Node, Node>();
  const dropped = new Set<Node>();
  const used = new Set([...g.initializers.keys(), ...g.nodes.flatMap((n) => n.outputs)]);
  let folded = 0;

  for (const bn of g.nodes) {
    if (bn.op !== 'BatchNormalization' || bn.domain || bn.outputs.filter(Boolean).length !== 1) continue;
    const x = bn.inputs[0];
    const conv = producer.get(x);
    if (!conv || conv.op !== 'Conv' || conv.domain || replaced.has(conv) || readers.get(x) !== 1 || outputs.has(x)) continue;
    const [wName, bName] = [conv.inputs[1], conv.inputs[2]];
    const wT = inits.get(wName);
    // A weight another node reads cannot change under it.
    if (!wT || readers.get(wName) !== 1 || (bName && readers.get(bName) !== 1)) continue;
    const w = floatValues(wT), dims = tensorDims(wT);
    const p = bn.inputs.slice(1, 5).map((n) => (inits.has(n) ? floatValues(inits.get(n)!) : undefined));
    const b = bName ? (inits.has(bName) ? floatValues(inits.get(bName)!) : undefined) : new Float32Array(dims[0]);
    if (!w || !b || p.some((v) => !v || v.length !== dims[0]) || b.length !== dims[0]) continue;
    const [gamma, beta, mean, variance] = p as Float32Array[];
    const epsAttr = bn.attrs.get('epsilon');
    const eps = epsAttr?.f ?? 1e-5;
    const per = w.length / dims[0];
    const w2 = new Float32Array(w.length), b2 = new Float32Array(dims[0]);
    for (let c = 0; c < dims[0]; c++) {
      const k = gamma[c] / Math.sqrt(variance[c] + eps);
      for (let i = c * per; i < (c + 1) * per; i++) w2[i] = w[i] * k;
      b2[c] = (b[c] - mean[c]) * k + beta[c];
    }
    let newB = bName;
    if (!newB) { newB = `${wName}/bias`; for (let k = 1; used.has(newB); k++) newB = `${wName}/bias_${k}`; used.add(newB); }
    inits.set(wName, floatTensor(wName, dims, w2));
    inits.set(newB, floatTensor(newB, [dims[0]], b2));
    replaced.set(conv, { ...conv, inputs: [conv.inputs[0], wName, newB], outputs: [bn.outputs[0]] });
    dropped.add(bn);
    folded++;
  }
  if (!folded) return { model, folded };
  const nodes = g.nodes.filter((n) => !dropped.has(n)).map((n) => replaced.get(n) ?? n);
  const read = new Set(nodes.flatMap(readsOf));
  const initializers = new Map([...inits].filter(([n]) => read.has(n) || outputs.has(n)));
  // value_info of the conv's old output would now describe nothing.
  const gone = new Set([...dropped].map((bn) => bn.inputs[0]));
  const valueInfo = new Map([...g.valueInfo].filter(([n]) => !gone.has(n)));
  return { model: { ...model, graph: { ...g, nodes, initializers, valueInfo } }, folded };
}

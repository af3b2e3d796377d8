// How a QDQ model runs on an integer interpreter: DequantizeLinear → op → QuantizeLinear
// is one int8 kernel. Its MACs are int8 MACs; the float tensors around it never exist:
// a value made by DequantizeLinear is its int8 input, a value only QuantizeLinear reads
// is its int8 output, a Relu fused into the kernel (a matrix op's or an Add's) writes the kernel's buffer. Values
// computed from weights alone (dequantized weights, bias scales) are weights.
import type { Graph, Node } from '../graph/ir.js';
import { readsOf } from '../graph/links.js';

const MATRIX = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);
const INTEGER_KERNELS = new Set(['QLinearConv', 'QLinearMatMul', 'ConvInteger', 'MatMulInteger']);
const FUSED_ACTIVATION = new Set(['Relu', 'Clip']);

export interface QdqView {
  /** node indices whose MACs run as int8 */
  int8Nodes: Set<number>;
  /** float activation → the int8 value whose buffer holds it */
  alias: Map<string, string>;
  /** node outputs computed from weights alone */
  weights: Set<string>;
}

export type IoNode = { inputs: string[]; outputs: string[]; reads: string[] };

/** undefined when the graph has no QuantizeLinear/DequantizeLinear: nothing to reinterpret. `order`: a topological order. */
export function qdqView(g: Graph, order: number[]): QdqView | undefined {
  if (!g.nodes.some((n) => !n.domain && (n.op === 'QuantizeLinear' || n.op === 'DequantizeLinear'))) return undefined;
  const producer = new Map<string, Node>();
  for (const n of g.nodes) for (const o of n.outputs) if (o) producer.set(o, n);
  const consumers = new Map<string, Node[]>();
  for (const n of g.nodes) for (const r of readsOf(n)) { let l = consumers.get(r); if (!l) consumers.set(r, (l = [])); l.push(n); }
  const io = new Set([...g.outputs.map((o) => o.name), ...g.inputs.map((v) => v.name)]);

  const constant = new Set(g.initializers.keys());
  const weights = new Set<string>();
  for (const i of order) {
    const n = g.nodes[i], ins = n.inputs.filter(Boolean);
    if ((n.op === 'Constant' && !ins.length) || (ins.length && ins.every((x) => constant.has(x)) && !n.captures.length)) {
      for (const o of n.outputs) if (o) { constant.add(o); if (n.op !== 'Constant') weights.add(o); }
    }
  }
  const link = new Map<string, string>();
  const onlyQuantized = (v: string) => { const c = consumers.get(v) ?? []; return c.length > 0 && c.every((n) => !n.domain && n.op === 'QuantizeLinear'); };
  for (const n of g.nodes) {
    if (n.domain) continue;
    // every output: each part of a Split is quantized on its own
    n.outputs.forEach((out, k) => {
      if (!out || io.has(out) || constant.has(out)) return;
      if (n.op === 'DequantizeLinear') { if (k === 0) link.set(out, n.inputs[0]); }
      else if (onlyQuantized(out)) link.set(out, consumers.get(out)![0].outputs[0]);
    });
  }
  const isDq = (v: string) => { const p = producer.get(v); return !!p && !p.domain && p.op === 'DequantizeLinear'; };
  const int8Nodes = new Set<number>();
  g.nodes.forEach((n, i) => {
    if (n.domain) return;
    if (INTEGER_KERNELS.has(n.op)) { int8Nodes.add(i); return; }
    const ins = n.inputs.filter(Boolean), out = n.outputs[0];
    if (!MATRIX.has(n.op) || !ins.length || !ins.every(isDq) || io.has(out)) return;
    const c = consumers.get(out) ?? [];
    const act = c.length === 1 && !c[0].domain && FUSED_ACTIVATION.has(c[0].op) ? c[0].outputs[0] : undefined;
    if (onlyQuantized(out)) int8Nodes.add(i);
    else if (act && !io.has(act) && onlyQuantized(act)) { int8Nodes.add(i); link.set(out, act); }
  });
  // Any other op followed by a lone Relu/Clip that is quantized (an Add: the QDQ pass leaves no int8
  // boundary between them either) is one kernel as well, writing the activation's int8 buffer.
  for (const n of g.nodes) {
    const out = n.outputs[0];
    if (n.domain || !out || link.has(out) || io.has(out) || constant.has(out) || n.op === 'QuantizeLinear' || n.op === 'DequantizeLinear' || FUSED_ACTIVATION.has(n.op)) continue;
    const c = consumers.get(out) ?? [];
    const act = c.length === 1 && !c[0].domain && FUSED_ACTIVATION.has(c[0].op) ? c[0].outputs[0] : undefined;
    if (act && !io.has(act) && onlyQuantized(act)) link.set(out, act);
  }
  const alias = new Map<string, string>();
  for (const v of link.keys()) {
    let r = v;
    for (let k = 0; k < 64 && link.has(r); k++) r = link.get(r)!;
    alias.set(v, r);
  }
  return { int8Nodes, alias, weights };
}

/**
 * Nodes as the memory model sees them once aliases are resolved: a buffer is born at its first
 * writer; a later writer of the same buffer (an in-place Relu, a QuantizeLinear) reads it.
 */
export function ioView(g: Graph, order: number[], view: QdqView | undefined): IoNode[] {
  const plain = g.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));
  if (!view) return plain;
  const a = (v: string) => view.alias.get(v) ?? v;
  const made = new Set<string>();
  for (const i of order) {
    const n = g.nodes[i];
    const reads = readsOf(n).map(a), outputs: string[] = [];
    for (const o of n.outputs) {
      if (!o) continue;
      const r = a(o);
      if (made.has(r)) reads.push(r); else { made.add(r); outputs.push(r); }
    }
    plain[i] = { inputs: n.inputs.map((x) => (x ? a(x) : x)), outputs, reads };
  }
  return plain;
}

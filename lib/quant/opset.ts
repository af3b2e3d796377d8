// Opset 11/12 → 13, as a graph pass, for quantization: per-channel QuantizeLinear/DequantizeLinear (the
// `axis` attribute) need opset 13. Most operators of a convolutional model mean the same at 11, 12 and 13
// (the changes are added element types); a few moved an attribute to an input, and are rewritten to say
// the same at 13; one changed meaning (Softmax and its kin coerced the input to 2-D around `axis`; at 13
// `axis` is one axis), which is the same only where `axis` is the last axis. Anything else is refused by
// operator name. Versions: the ONNX operator changelog (Changelog.md), from memory.
import type { Model, Node, Graph } from '../graph/ir.js';
import type { AttributeProto, TensorProto } from '../onnx/types.js';
import { OfframpError } from '../errors.js';

export const QDQ_OPSET = 13;

/** Operators whose meaning for float tensors is the same at opsets 11, 12 and 13 (only types were added). */
const SAME = new Set([
  'Abs', 'Add', 'And', 'ArgMax', 'ArgMin', 'AveragePool', 'BatchNormalization', 'Cast', 'Ceil', 'Clip', 'Concat', 'Constant', 'ConstantOfShape',
  'Conv', 'ConvTranspose', 'Cos', 'DepthToSpace', 'Div', 'Elu', 'Equal', 'Erf', 'Exp', 'Expand', 'Flatten', 'Floor', 'Gather', 'GatherElements',
  'GatherND', 'Gemm', 'GlobalAveragePool', 'GlobalMaxPool', 'Greater', 'HardSigmoid', 'Identity', 'InstanceNormalization', 'LeakyRelu', 'Less',
  'Log', 'LRN', 'MatMul', 'Max', 'MaxPool', 'Mean', 'Min', 'Mul', 'Neg', 'Not', 'Or', 'Pad', 'Pow', 'PRelu', 'Reciprocal', 'ReduceL1', 'ReduceL2',
  'ReduceLogSum', 'ReduceLogSumExp', 'ReduceMax', 'ReduceMean', 'ReduceMin', 'ReduceProd', 'ReduceSumSquare', 'Relu', 'Reshape', 'Selu',
  'Shape', 'Sigmoid', 'Sign', 'Sin', 'Size', 'Slice', 'Softplus', 'Softsign', 'SpaceToDepth', 'Sqrt', 'Sub', 'Sum', 'Tanh', 'Tile', 'TopK',
  'Transpose', 'Where', 'Xor', 'Range', 'NonZero', 'OneHot', 'ScatterElements', 'ScatterND', 'Einsum', 'Celu',
]);
/** `axes` (or `split`) went from an attribute to an int64 input at 13. */
const TO_INPUT: Record<string, { attr: string; at: number }> = {
  Squeeze: { attr: 'axes', at: 1 }, Unsqueeze: { attr: 'axes', at: 1 }, ReduceSum: { attr: 'axes', at: 1 }, Split: { attr: 'split', at: 1 },
};
/** Coerced the input to 2-D around `axis` before 13; one axis from 13. */
const COERCED = new Set(['Softmax', 'LogSoftmax', 'Hardmax']);

export interface OpsetRaise { model: Model; from: number; to: number; rewritten: number }

const int64s = (name: string, v: readonly bigint[]): TensorProto => ({ name, dataType: 7, dims: BigInt64Array.of(BigInt(v.length)), int64Data: BigInt64Array.from(v) } as TensorProto);

/**
 * `model` at opset 13 if it is below and every operator means the same there (rewritten where an attribute
 * became an input); refused naming the first operator that does not. `rank` gives a value's rank (Softmax).
 */
export function raiseOpset(model: Model, rank: (value: string) => number | undefined, file?: string): OpsetRaise {
  const from = model.opsets.get('') ?? 0;
  if (from >= QDQ_OPSET) return { model, from, to: from, rewritten: 0 };
  if (from < 11) throw new OfframpError('graph', `opset ${from}: quantization raises opsets 11 and 12 to 13; re-export the model at opset 11 or later`, file);
  const g = model.graph;
  const used = new Set<string>([...g.initializers.keys(), ...g.nodes.flatMap((n) => n.outputs), ...g.inputs.map((v) => v.name)]);
  const fresh = (base: string) => { let n = base; for (let k = 1; used.has(n); k++) n = `${base}_${k}`; used.add(n); return n; };
  const inits = new Map(g.initializers);
  let rewritten = 0;
  const refuse = (n: Node, why: string) => new OfframpError('graph', `opset ${from}: ${n.op}${n.name ? ` '${n.name}'` : ''} ${why}; quantization needs opset ${QDQ_OPSET}: re-export the model at opset 13 or later`, file);
  const nodes = g.nodes.map((n): Node => {
    if (n.domain) throw refuse(n, `is in domain '${n.domain}', whose opset is not raised`);
    if (n.bodies.size) throw refuse(n, 'holds subgraphs, which are not raised');
    if (SAME.has(n.op)) return n;
    const move = TO_INPUT[n.op];
    if (move) {
      const a = n.attrs.get(move.attr);
      if (!a) return n;
      const name = fresh(`${n.outputs[0]}/${move.attr}`);
      inits.set(name, int64s(name, Array.from(a.ints ?? [], (x) => BigInt(x))));
      const attrs = new Map(n.attrs);
      attrs.delete(move.attr);
      const inputs = [...n.inputs];
      while (inputs.length < move.at) inputs.push('');
      inputs.splice(move.at, 0, name);
      rewritten++;
      return { ...n, inputs, attrs, proto: { ...n.proto, attribute: [...attrs.values()] as AttributeProto[] } };
    }
    if (COERCED.has(n.op)) {
      const r = rank(n.inputs[0]);
      const axis = Number(n.attrs.get('axis')?.i ?? 1n);
      if (r !== undefined && (axis === -1 || axis === r - 1)) return n;
      throw refuse(n, `over axis ${axis}${r !== undefined ? ` of a rank-${r} tensor` : ''} coerces its input to 2-D before opset 13 and reads one axis from 13 (not the same unless axis is the last)`);
    }
    if (n.op === 'Dropout') {
      // Inference: the identity at every opset; the ratio attribute of Dropout-10 became an input at 12.
      if (!n.attrs.has('ratio')) return n;
      const attrs = new Map(n.attrs);
      attrs.delete('ratio');
      rewritten++;
      return { ...n, attrs, proto: { ...n.proto, attribute: [...attrs.values()] as AttributeProto[] } };
    }
    throw refuse(n, 'is not known to mean the same at opset 13');
  });
  const graph: Graph = { ...g, nodes, initializers: inits };
  const opsets = new Map(model.opsets);
  opsets.set('', QDQ_OPSET);
  // Opset 13 belongs to IR version 7 (onnx/helper.py's VERSION_TABLE, from memory).
  return { model: { ...model, opsets, graph, irVersion: model.irVersion < 7n ? 7n : model.irVersion }, from, to: QDQ_OPSET, rewritten };
}

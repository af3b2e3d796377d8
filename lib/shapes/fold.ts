// Constant folding of shape subgraphs as a pass: nodes whose outputs the shape
// rules folded to known integer values (Shape → Gather → Concat → … chains)
// become initializers, and what no longer feeds anything is removed. A
// microcontroller interpreter then never runs shape arithmetic.
import type { Model, Node } from '../graph/ir.js';
import { eliminateDeadCode } from '../graph/passes.js';
import type { TensorProto } from '../onnx/types.js';
import type { Const } from '../ops/rule.js';
import type { ShapeResult } from './infer.js';

const INT_TYPES = new Set([6, 7]);
const MAX_ELEMENTS = 1024;

function constTensor(name: string, c: Const): TensorProto {
  const dims = BigInt64Array.from(c.dims.map(BigInt));
  return c.dtype === 7
    ? { name, dims, dataType: 7, int64Data: BigInt64Array.from(c.data.map((v) => BigInt(Math.trunc(v)))) }
    : { name, dims, dataType: c.dtype, int32Data: Int32Array.from(c.data) };
}

/** A node folds when every output is a small integer constant and it has no body. */
const folds = (n: Node, shapes: ShapeResult) => n.bodies.size === 0 && n.outputs.length > 0 && n.outputs.every((o) => {
  const v = o ? shapes.values.get(o)?.value : undefined;
  return !!v && INT_TYPES.has(v.dtype) && v.data.length <= MAX_ELEMENTS && v.data.every(Number.isSafeInteger);
});

export function foldShapeSubgraphs(model: Model, shapes: ShapeResult): { model: Model; folded: number } {
  const g = model.graph;
  const outputs = new Set(g.outputs.map((o) => o.name));
  const initializers = new Map(g.initializers);
  const nodes: Node[] = [];
  let folded = 0;
  for (const n of g.nodes) {
    // Graph outputs keep their producers: the model's results are not turned into weights.
    if (n.op !== 'Constant' && folds(n, shapes) && !n.outputs.some((o) => outputs.has(o))) {
      for (const o of n.outputs) initializers.set(o, constTensor(o, shapes.values.get(o)!.value!));
      folded++;
    } else nodes.push(n);
  }
  const graph = eliminateDeadCode({ ...g, nodes, initializers });
  return { model: { ...model, graph }, folded };
}

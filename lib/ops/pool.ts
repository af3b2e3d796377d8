// Pooling over N×C×spatial inputs. Cost: one op per kernel tap per output element
// (compare, add, or power-and-add), common practice; no MACs. Padding taps are
// counted too: the window's size, not its overlap with the input, sets the loop.
import type { Dim } from '../graph/ir.js';
import type { OpRule, InferCtx, Known, CostCtx, Cost } from './rule.js';
import { known, numel, prod, shapeOf } from './rule.js';
import { spatialOut, windowOf } from './window.js';
import { INT64 } from '../onnx/dtype.js';

function poolShape(c: InferCtx): Dim[] | undefined {
  const x = shapeOf(c, 0);
  if (!x || x.length < 3) return undefined;
  const win = windowOf(c, x.length - 2);
  if (!win) return undefined;
  // ceil_mode exists from opset 10 (MaxPool, AveragePool) and 18 (LpPool); absent it is 0.
  return [x[0], x[1], ...spatialOut(x.slice(2), win, c.int('ceil_mode', 0) !== 0, () => c.fresh('pool'))];
}

const taps = (c: CostCtx): Cost => ({ macs: 0n, ops: numel(c.outputs[0]) * prod(c.ints('kernel_shape', [])) });

const pool = (op: string): OpRule => ({
  op,
  infer: (c) => {
    const s = poolShape(c), dt = c.inputs[0]?.type.dtype;
    if (!s || dt === undefined) return [];
    // MaxPool's optional Indices (opset 8+) are int64 flat positions, Y's shape.
    const out: (Known | undefined)[] = [known(dt, s)];
    if (op === 'MaxPool' && c.node.outputs[1]) out.push(known(INT64, s));
    return out;
  },
  cost: taps,
});

const globalPool = (op: string): OpRule => ({
  op,
  infer: (c) => {
    const x = shapeOf(c, 0), dt = c.inputs[0]?.type.dtype;
    if (!x || dt === undefined || x.length < 2) return [];
    return [known(dt, [x[0], x[1], ...x.slice(2).map(() => 1)])];
  },
  // The window is the whole spatial extent: one op per input element.
  cost: (c) => ({ macs: 0n, ops: numel(c.inputs[0]!) }),
});

export const rules: OpRule[] = [
  pool('MaxPool'), pool('AveragePool'), pool('LpPool'),
  globalPool('GlobalAveragePool'), globalPool('GlobalMaxPool'), globalPool('GlobalLpPool'),
];

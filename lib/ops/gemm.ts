// Matrix products. Every output element of an M×N result is a K-long dot product,
// so MACs = (output elements)·K, batch dims included.
import type { Dim } from '../graph/ir.js';
import type { InferCtx, Known, OpRule, CostCtx, Cost } from './rule.js';
import { broadcast, isNum, known, numel, shapeOf } from './rule.js';
import { INT32 } from '../onnx/dtype.js';

const gemm: OpRule = {
  op: 'Gemm',
  infer: (c) => {
    const a = shapeOf(c, 0), b = shapeOf(c, 1), dt = c.inputs[0]?.type.dtype;
    if (!a || !b || dt === undefined) return [];
    if (a.length !== 2 || b.length !== 2) throw new RangeError(`Gemm wants 2-D operands, got ranks ${a.length} and ${b.length}`);
    const ta = c.int('transA', 0) !== 0, tb = c.int('transB', 0) !== 0;
    const [m, ka] = ta ? [a[1], a[0]] : a, [kb, n] = tb ? [b[1], b[0]] : b;
    if (isNum(ka) && isNum(kb) && ka !== kb) throw new RangeError(`Gemm inner dims ${ka} and ${kb} differ`);
    return [known(dt, [m, n])];
  },
  // alpha scales each output (1 op unless alpha is 1); C adds one op, beta≠1 another.
  cost: (c) => {
    const y = numel(c.outputs[0]), a = c.inputs[0]!;
    const k = a[c.int('transA', 0) ? 0 : 1];
    const ops = (c.float('alpha', 1) !== 1 ? 1n : 0n) + (c.inputs[2] ? (c.float('beta', 1) !== 1 ? 2n : 1n) : 0n);
    return { macs: y * BigInt(k), ops: y * ops };
  },
};

/** numpy.matmul shapes: a 1-D operand gains a unit dim that the result then drops; batch dims broadcast. */
export function matmulShape(a: Dim[], b: Dim[]): Dim[] {
  if (!a.length || !b.length) throw new RangeError('MatMul of a scalar');
  const a2 = a.length === 1 ? [1, a[0]] : a, b2 = b.length === 1 ? [b[0], 1] : b;
  const ka = a2[a2.length - 1], kb = b2[b2.length - 2];
  if (isNum(ka) && isNum(kb) && ka !== kb) throw new RangeError(`MatMul inner dims ${ka} and ${kb} differ`);
  const batch = broadcast(a2.slice(0, -2), b2.slice(0, -2));
  if (!batch) throw new RangeError(`MatMul batch dims [${a2.slice(0, -2)}] and [${b2.slice(0, -2)}] do not broadcast`);
  return [...batch, ...(a.length > 1 ? [a2[a2.length - 2]] : []), ...(b.length > 1 ? [b2[b2.length - 1]] : [])];
}

const matmulInfer = (ai: number, bi: number, dtype: (c: InferCtx) => number | undefined) => (c: InferCtx): (Known | undefined)[] => {
  const a = shapeOf(c, ai), b = shapeOf(c, bi), dt = dtype(c);
  return a && b && dt !== undefined ? [known(dt, matmulShape(a, b))] : [];
};
// perOut: QLinearMatMul requantises each output (scale, round, zero point, saturate: 3 ops, common practice).
const matmulCost = (ai: number, perOut: bigint) => (c: CostCtx): Cost => {
  const y = numel(c.outputs[0]), a = c.inputs[ai]!;
  return { macs: y * BigInt(a[a.length - 1]), ops: y * perOut };
};

export const rules: OpRule[] = [
  gemm,
  { op: 'MatMul', infer: matmulInfer(0, 1, (c) => c.inputs[0]?.type.dtype), cost: matmulCost(0, 0n) },
  // Zero-point offsets fold into the integer accumulation.
  { op: 'MatMulInteger', infer: matmulInfer(0, 1, () => INT32), cost: matmulCost(0, 0n) },
  // a, a_scale, a_zero_point, b, b_scale, b_zero_point, y_scale, y_zero_point; y has y_zero_point's type.
  { op: 'QLinearMatMul', infer: matmulInfer(0, 3, (c) => c.inputs[7]?.type.dtype ?? c.inputs[0]?.type.dtype), cost: matmulCost(0, 3n) },
];

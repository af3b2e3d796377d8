// Softmax family: shapes are unchanged. The axis default moved from 1 (with the
// input coerced to 2-D around it) to -1 (a single axis) in opset 13. Neither
// changes the shape; the versions differ in which axis is checked against the rank.
// Ops per element, matching the elementwise rules' constants (exp = 4):
//   Softmax    max 1 + subtract 1 + exp 4 + sum 1 + divide 1 = 8
//   LogSoftmax max 1 + subtract 1 + exp 4 + sum 1 + subtract log-sum 1 = 8
//   Hardmax    compare 1 + write one-hot 1 = 2
import type { OpRule } from './rule.js';
import { axis, like, perOutput, shapeOf } from './rule.js';

const version = (op: string, k: bigint, since: number, defAxis: number): OpRule => ({
  op, since,
  infer: (c) => {
    const x = shapeOf(c, 0);
    // Old versions coerce to 2-D, where axis = rank (all dims on the left) is legal.
    if (x?.length) axis(c.int('axis', defAxis), x.length + (since < 13 ? 1 : 0));
    return [like(c, 0)];
  },
  cost: perOutput(k),
});
const family = (op: string, k: bigint): OpRule[] => [version(op, k, 1, 1), version(op, k, 13, -1)];

export const rules: OpRule[] = [...family('Softmax', 8n), ...family('LogSoftmax', 8n), ...family('Hardmax', 2n)];

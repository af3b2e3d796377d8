// Shape and Size: the values are the (static) dims, so they fold whenever the
// input's dims are numbers. Shape takes a start/end window since opset 15.
import type { OpRule, InferCtx } from './rule.js';
import { known, shapeOf } from './rule.js';
import { INT64 } from '../onnx/dtype.js';
import { allNum, count, int64s } from './fold-move.js';

const shape = (windowed: boolean): OpRule => ({
  op: 'Shape',
  since: windowed ? 15 : 1,
  infer: (c: InferCtx) => {
    const s = shapeOf(c, 0);
    if (!s) return [];
    const r = s.length;
    const at = (v: number) => Math.min(r, Math.max(0, v < 0 ? v + r : v));
    const dims = windowed ? s.slice(at(c.int('start', 0)), at(c.int('end', r))) : s;
    return [known(INT64, [dims.length], allNum(dims) ? int64s(dims) : undefined)];
  },
});

const size: OpRule = {
  op: 'Size',
  infer: (c) => {
    const s = shapeOf(c, 0);
    return [known(INT64, [], allNum(s) ? { dtype: INT64, dims: [], data: [count(s)] } : undefined)];
  },
};

export const rules: OpRule[] = [shape(false), shape(true), size];

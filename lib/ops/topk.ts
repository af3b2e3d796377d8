// TopK (k an attribute before opset 10, a 1-element input after) and OneHot
// (depth inserted at `axis`, element type from `values`).
import type { Dim } from '../graph/ir.js';
import type { OpRule } from './rule.js';
import { axis, known, numel } from './rule.js';
import { INT64 } from '../onnx/dtype.js';

const topk = (since: number): OpRule => ({
  op: 'TopK',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    const k = since < 10 ? c.int('k') : c.inputs[1]?.value?.data[0];
    if (!x || !s || k === undefined) return [];
    const out = [...s];
    out[axis(c.int('axis', -1), s.length)] = k;
    return [known(x.type.dtype, out), known(INT64, out)];
  },
  // A selection pass: one comparison per input element.
  cost: (c) => ({ macs: 0n, ops: c.inputs[0] ? numel(c.inputs[0]) : 0n }),
});

const oneHot: OpRule = {
  op: 'OneHot',
  since: 9,
  infer: (c) => {
    const q = c.inputs[0]?.type.shape, vals = c.inputs[2];
    const depth = c.inputs[1]?.value?.data[0];
    if (!q || !vals || depth === undefined) return [];
    const a = axis(c.int('axis', -1), q.length + 1);
    const out: Dim[] = [...q.slice(0, a), Math.trunc(depth), ...q.slice(a)];
    return [known(vals.type.dtype, out)];
  },
};

export const rules: OpRule[] = [topk(1), topk(10), oneHot];

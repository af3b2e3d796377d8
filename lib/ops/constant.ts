// Value sources: Constant (every attribute form), ConstantOfShape, EyeLike, Range.
// They fold, so shapes computed from them stay static.
import type { OpRule, InferCtx, Known } from './rule.js';
import { known, shapeOf } from './rule.js';
import { FLOAT, INT64 } from '../onnx/dtype.js';
import { tensorDims } from '../onnx/tensor.js';
import { FOLD_LIMIT, count, intsIn, valued } from './fold-move.js';

const STRING = 8;

function constant(c: InferCtx): (Known | undefined)[] {
  const a = (n: string) => c.raw(n);
  const t = a('value')?.t;
  if (t) return [known(t.dataType ?? 0, tensorDims(t), c.tensor('value'))];
  const sp = a('sparse_value')?.sparseTensor;
  if (sp) return [known(sp.values?.dataType ?? 0, Array.from(sp.dims ?? [], Number))];
  if (c.has('value_float')) return [valued({ dtype: FLOAT, dims: [], data: [c.float('value_float', 0)] })];
  if (c.has('value_floats')) { const v = c.floats('value_floats') ?? []; return [valued({ dtype: FLOAT, dims: [v.length], data: v })]; }
  if (c.has('value_int')) return [valued({ dtype: INT64, dims: [], data: [c.int('value_int', 0)] })];
  if (c.has('value_ints')) { const v = c.ints('value_ints', []); return [valued({ dtype: INT64, dims: [v.length], data: v })]; }
  if (c.has('value_string')) return [known(STRING, [])];
  if (c.has('value_strings')) return [known(STRING, [a('value_strings')?.strings?.length ?? 0])];
  return [];
}

// Output dims are the value of the input; the element type and fill come from `value` (float 0).
function constantOfShape(c: InferCtx): (Known | undefined)[] {
  const dims = intsIn(c, 0);
  const v = c.tensor('value');
  const dtype = c.raw('value')?.t?.dataType ?? FLOAT;
  if (!dims || !c.inputs[0]) return [];
  if (dims.some((d) => d < 0)) throw new RangeError(`negative dim in ConstantOfShape: ${dims}`);
  const fill = v?.data[0] ?? 0;
  return [known(dtype, dims, count(dims) <= FOLD_LIMIT ? { dtype, dims, data: new Array(count(dims)).fill(fill) } : undefined)];
}

const eyeLike: OpRule = {
  op: 'EyeLike',
  infer: (c) => { const x = c.inputs[0]; return x ? [known(c.int('dtype') ?? x.type.dtype, shapeOf(c, 0))] : []; },
};

// Length max(ceil((limit - start) / delta), 0); the type is start's.
const range: OpRule = {
  op: 'Range',
  since: 11,
  infer: (c) => {
    const [s, l, d] = [0, 1, 2].map((i) => c.inputs[i]?.value?.data[0]);
    const dtype = c.inputs[0]?.type.dtype;
    if (dtype === undefined) return [];
    if (s === undefined || l === undefined || d === undefined) return [];
    if (d === 0) throw new RangeError('Range delta is 0');
    const n = Math.max(Math.ceil((l - s) / d), 0);
    const round = dtype === FLOAT ? Math.fround : (x: number) => x;
    return [known(dtype, [n], n <= FOLD_LIMIT ? { dtype, dims: [n], data: Array.from({ length: n }, (_, i) => round(s + i * d)) } : undefined)];
  },
};

export const rules: OpRule[] = [
  { op: 'Constant', infer: constant },
  { op: 'ConstantOfShape', since: 9, infer: constantOfShape },
  eyeLike, range,
];

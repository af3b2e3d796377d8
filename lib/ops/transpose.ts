// Axis permutations: Transpose (perm defaults to reversed axes), DepthToSpace and
// SpaceToDepth (NCHW blocks). Transpose folds; the block ops never carry shapes.
import type { Dim } from '../graph/ir.js';
import type { OpRule } from './rule.js';
import { isNum, known } from './rule.js';
import { flat, iota, remap, strides } from './fold-move.js';

const transpose: OpRule = {
  op: 'Transpose',
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    const perm = c.ints('perm') ?? iota(s.length).reverse();
    if (perm.length !== s.length || new Set(perm).size !== s.length || perm.some((p) => p < 0 || p >= s.length)) {
      throw new RangeError(`Transpose perm ${perm} does not fit rank ${s.length}`);
    }
    const out = perm.map((p) => s[p]);
    const v = x.value;
    let folded;
    if (v) {
      const st = strides(v.dims);
      const pst = perm.map((p) => st[p]);
      folded = remap(v, perm.map((p) => v.dims[p]), (idx) => flat(idx, pst));
    }
    return [known(x.type.dtype, out, folded)];
  },
};

const div = (d: Dim, k: number): Dim => {
  if (!isNum(d)) return `${d}/${k}`;
  if (d % k) throw new RangeError(`${d} is not divisible by ${k}`);
  return d / k;
};
const mul = (d: Dim, k: number): Dim => (isNum(d) ? d * k : `${d}*${k}`);

const blocks = (op: string, toSpace: boolean): OpRule => ({
  op,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    const b = c.int('blocksize');
    if (!x || !s || b === undefined) return [];
    if (s.length !== 4) throw new RangeError(`${op} needs a 4-D input, got rank ${s.length}`);
    const [n, ch, h, w] = s;
    const out = toSpace ? [n, div(ch, b * b), mul(h, b), mul(w, b)] : [n, mul(ch, b * b), div(h, b), div(w, b)];
    return [known(x.type.dtype, out)];
  },
});

export const rules: OpRule[] = [transpose, blocks('DepthToSpace', true), blocks('SpaceToDepth', false)];

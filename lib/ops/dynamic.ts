// Ops whose output size depends on the data: NonZero, Unique, Compress. With a
// folded input they fold; otherwise the data-dependent dim is a fresh symbol,
// shared by every output that has it.
import type { Dim } from '../graph/ir.js';
import type { OpRule } from './rule.js';
import { axis, known } from './rule.js';
import { INT64 } from '../onnx/dtype.js';
import { FOLD_LIMIT, allNum, count, dimProd, eachIndex } from './fold-move.js';

const nonZero: OpRule = {
  op: 'NonZero',
  since: 9,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    const v = x.value;
    if (!v || count(v.dims) > FOLD_LIMIT) return [known(INT64, [s.length, c.fresh('nonzero')])];
    const hits: number[][] = [];
    eachIndex(v.dims, (idx, k) => { if (v.data[k]) hits.push([...idx]); });
    const r = v.dims.length, n = hits.length;
    const data = Array.from({ length: r * n }, (_, j) => hits[j % n][Math.floor(j / n)]);
    return [known(INT64, [r, n], { dtype: INT64, dims: [r, n], data })];
  },
};

/** Number of distinct slices of data along axis a. */
function distinctSlices(data: number[], dims: number[], a: number): number {
  const inner = count(dims.slice(a + 1)), d = dims[a], keys = new Set<string>();
  for (let j = 0; j < d; j++) {
    const sl: number[] = [];
    for (let o = 0; o < count(dims.slice(0, a)); o++) for (let k = 0; k < inner; k++) sl.push(data[(o * d + j) * inner + k]);
    keys.add(sl.join(','));
  }
  return keys.size;
}

// Y, indices, inverse_indices, counts. Without `axis` the input is flattened.
const unique: OpRule = {
  op: 'Unique',
  since: 11,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    const ai = c.int('axis');
    if (ai === undefined) {
      const v = x.value;
      const seen = v && [...new Set(v.data)];
      if (seen && c.int('sorted', 1)) seen.sort((a, b) => a - b);
      const u: Dim = seen ? seen.length : c.fresh('unique');
      const y = seen && { dtype: x.type.dtype, dims: [seen.length], data: seen };
      return [known(x.type.dtype, [u], y), known(INT64, [u]), known(INT64, [dimProd(s)]), known(INT64, [u])];
    }
    const a = axis(ai, s.length), v = x.value;
    const u: Dim = v && count(v.dims) <= FOLD_LIMIT ? distinctSlices(v.data, v.dims, a) : c.fresh('unique');
    const out = [...s];
    out[a] = u;
    return [known(x.type.dtype, out), known(INT64, [u]), known(INT64, [s[a]]), known(INT64, [u])];
  },
};

// Selected slices: the count of true entries of `condition` (within the axis' length).
const compress: OpRule = {
  op: 'Compress',
  since: 9,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape, cond = c.inputs[1]?.value;
    if (!x || !s) return [];
    const ai = c.int('axis');
    const len = ai === undefined ? (allNum(s) ? count(s) : undefined) : s[axis(ai, s.length)];
    const n: Dim = cond ? cond.data.slice(0, typeof len === 'number' ? len : undefined).filter((b) => b).length : c.fresh('compress');
    if (ai === undefined) return [known(x.type.dtype, [n])];
    const out = [...s];
    out[axis(ai, s.length)] = n;
    return [known(x.type.dtype, out)];
  },
};

export const rules: OpRule[] = [nonZero, unique, compress];

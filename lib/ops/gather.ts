// Indexing ops. Gather folds (constant data and indices; a scalar index drops the
// axis), which is how exporters read one dim out of a Shape; GatherElements
// folds too. Scatter* write into data and keep its shape.
import type { Dim } from '../graph/ir.js';
import type { OpRule } from './rule.js';
import { axis, isNum, known, like } from './rule.js';
import { flat, remap, strides } from './fold-move.js';

const gather: OpRule = {
  op: 'Gather',
  infer: (c) => {
    const [x, ix] = c.inputs;
    const s = x?.type.shape, q = ix?.type.shape;
    if (!x || !ix || !s || !q) return [];
    const a = axis(c.int('axis', 0), s.length);
    const out = [...s.slice(0, a), ...q, ...s.slice(a + 1)];
    const v = x.value, iv = ix.value;
    let folded;
    if (v && iv) {
      const d = v.dims[a], vst = strides(v.dims), n = iv.dims.length;
      const ist = strides(iv.dims);
      const dims = [...v.dims.slice(0, a), ...iv.dims, ...v.dims.slice(a + 1)];
      folded = remap(v, dims, (idx) => {
        let j = iv.data[flat(idx.slice(a, a + n), ist)];
        if (j < 0) j += d;
        if (j < 0 || j >= d) throw new RangeError(`Gather index ${j} out of range for ${d}`);
        return flat([...idx.slice(0, a), j, ...idx.slice(a + n)], vst);
      });
    }
    return [known(x.type.dtype, out, folded)];
  },
};

const gatherElements: OpRule = {
  op: 'GatherElements',
  since: 11,
  infer: (c) => {
    const [x, ix] = c.inputs;
    const s = x?.type.shape, q = ix?.type.shape;
    if (!x || !ix || !s || !q) return [];
    if (q.length !== s.length) throw new RangeError(`GatherElements ranks ${s.length} and ${q.length} differ`);
    const a = axis(c.int('axis', 0), s.length);
    const v = x.value, iv = ix.value;
    let folded;
    if (v && iv) {
      const vst = strides(v.dims), ist = strides(iv.dims), d = v.dims[a];
      folded = remap(v, iv.dims, (idx) => {
        const j = iv.data[flat(idx, ist)];
        const src = [...idx];
        src[a] = j < 0 ? j + d : j;
        return flat(src, vst);
      });
    }
    return [known(x.type.dtype, q, folded)];
  },
};

// Output: indices.shape[:-1] + data.shape[batch_dims + k:], k = indices.shape[-1].
const gatherND: OpRule = {
  op: 'GatherND',
  since: 11,
  infer: (c) => {
    const [x, ix] = c.inputs;
    const s = x?.type.shape, q = ix?.type.shape;
    if (!x || !s || !q || !q.length) return [];
    const k = q[q.length - 1], b = c.int('batch_dims', 0);
    if (!isNum(k)) return [];
    if (b + k > s.length) throw new RangeError(`GatherND index depth ${k} exceeds rank ${s.length}`);
    const out: Dim[] = [...q.slice(0, -1), ...s.slice(b + k)];
    return [known(x.type.dtype, out)];
  },
};

const keepData = (op: string, since?: number): OpRule => ({ op, since, infer: (c) => [like(c, 0)] });

export const rules: OpRule[] = [
  gather, gatherElements, gatherND,
  keepData('ScatterND', 11), keepData('ScatterElements', 11), keepData('Scatter', 9),
];

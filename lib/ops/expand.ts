// Expand (bidirectional broadcast to a shape value) and Tile (repeat per axis).
// Both fold by index arithmetic; the data is only copied.
import type { Dim } from '../graph/ir.js';
import type { Const, OpRule } from './rule.js';
import { broadcast, dimMul, known } from './rule.js';
import { allNum, flat, intsIn, remap, strides } from './fold-move.js';

/** Broadcast `v` to `dims` (which already has v's dims broadcast in). */
function spread(v: Const, dims: number[]): Const | undefined {
  const off = dims.length - v.dims.length;
  const st = strides(v.dims);
  return remap(v, dims, (idx) => { let o = 0; for (let k = 0; k < v.dims.length; k++) o += (v.dims[k] === 1 ? 0 : idx[k + off]) * st[k]; return o; });
}

const expand: OpRule = {
  op: 'Expand',
  since: 8,
  infer: (c) => {
    const x = c.inputs[0], target = intsIn(c, 1);
    if (!x || !target || !c.inputs[1]) return [];
    const out = broadcast(x.type.shape, target);
    if (!out) return [];
    return [known(x.type.dtype, out, x.value && allNum(out) ? spread(x.value, out) : undefined)];
  },
};

function tiled(v: Const | undefined, reps: number[]): Const | undefined {
  if (!v) return undefined;
  const st = strides(v.dims);
  return remap(v, v.dims.map((d, i) => d * reps[i]), (idx) => flat(idx.map((i, k) => i % v.dims[k]), st));
}

// Tile-1 repeats one axis (`tiles` times along `axis`, both inputs); from opset 6, `repeats` covers every axis.
const tile = (since: number): OpRule => ({
  op: 'Tile',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    let reps: number[] | undefined;
    if (since < 6) {
      const t = c.inputs[1]?.value?.data[0], a = c.inputs[2]?.value?.data[0];
      if (t === undefined || a === undefined) return [];
      reps = s.map((_, i) => (i === a ? t : 1));
    } else reps = intsIn(c, 1);
    if (!reps || !c.inputs[1]) return [];
    if (reps.length !== s.length) throw new RangeError(`Tile repeats ${reps} do not fit rank ${s.length}`);
    const out = s.map((d, i): Dim => dimMul(d, reps![i]));
    return [known(x.type.dtype, out, tiled(x.value, reps))];
  },
});

export const rules: OpRule[] = [expand, tile(1), tile(6)];

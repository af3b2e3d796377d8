// Concat and Split along one axis. Both fold: Concat is how exporters assemble
// Reshape targets from gathered dims, Split is how they take them apart.
import type { Dim } from '../graph/ir.js';
import type { Const, OpRule, InferCtx, Known } from './rule.js';
import { axis, isNum, known } from './rule.js';
import { FOLD_LIMIT, count, dimSum, given, intsIn } from './fold-move.js';

function concatConst(vs: Const[], a: number, dtype: number): Const {
  const dims = [...vs[0].dims];
  dims[a] = vs.reduce((s, v) => s + v.dims[a], 0);
  const outer = count(dims.slice(0, a));
  const inner = vs.map((v) => count(v.dims.slice(a)));
  const data: number[] = [];
  for (let o = 0; o < outer; o++) vs.forEach((v, j) => { for (let k = 0; k < inner[j]; k++) data.push(v.data[o * inner[j] + k]); });
  return { dtype, dims, data };
}

const concat: OpRule = {
  op: 'Concat',
  infer: (c) => {
    const xs = c.inputs;
    if (!xs.length || xs.some((x) => !x?.type.shape)) return [];
    const shapes = xs.map((x) => x!.type.shape!);
    const r = shapes[0].length;
    if (shapes.some((s) => s.length !== r)) throw new RangeError(`Concat of ranks ${shapes.map((s) => s.length)}`);
    const ai = c.int('axis');
    if (ai === undefined) throw new RangeError('Concat needs an axis');
    const a = axis(ai, r);
    const out = shapes[0].map((_, i): Dim => {
      if (i === a) return dimSum(shapes.map((s) => s[i]));
      return shapes.map((s) => s[i]).find(isNum) ?? shapes[0][i];
    });
    const dtype = xs[0]!.type.dtype;
    const vs = xs.map((x) => x!.value);
    const v = vs.every((x) => x) && count(out as number[]) <= FOLD_LIMIT ? concatConst(vs as Const[], a, dtype) : undefined;
    return [known(dtype, out, v)];
  },
};

function splitConst(v: Const, a: number, parts: number[]): Const[] {
  const outer = count(v.dims.slice(0, a)), inner = count(v.dims.slice(a + 1)), d = v.dims[a];
  let at = 0;
  return parts.map((p) => {
    const data: number[] = [];
    for (let o = 0; o < outer; o++) for (let k = at * inner; k < (at + p) * inner; k++) data.push(v.data[o * d * inner + k]);
    at += p;
    const dims = [...v.dims];
    dims[a] = p;
    return { dtype: v.dtype, dims, data };
  });
}

// Sizes: Split-1 takes either an input or the attribute, Split-2..12 the attribute,
// 13+ the optional input; 18 adds num_outputs (ceil-sized parts, the last smaller).
const split = (since: number): OpRule => ({
  op: 'Split',
  since,
  infer: (c: InferCtx): (Known | undefined)[] => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    const a = axis(c.int('axis', 0), s.length);
    const n = c.node.outputs.length;
    let parts: number[] | undefined = since !== 2 && given(c, 1) ? intsIn(c, 1) : since < 13 ? c.ints('split') : undefined;
    if (since !== 2 && given(c, 1) && !parts) return [];
    if (parts && !parts.length) parts = undefined;
    const d = s[a];
    const k = c.int('num_outputs') ?? n;
    let dims: Dim[];
    if (parts) {
      if (parts.length !== n) throw new RangeError(`Split into ${parts.length} parts but ${n} outputs`);
      if (isNum(d) && parts.reduce((p, q) => p + q, 0) !== d) throw new RangeError(`Split parts ${parts} do not sum to ${d}`);
      dims = parts;
    } else if (isNum(d)) {
      const q = Math.ceil(d / k);
      dims = Array.from({ length: k }, (_, i) => Math.max(0, Math.min(q, d - i * q)));
    } else dims = new Array(k).fill(`${d}/${k}`);
    const vs = x.value && dims.every(isNum) ? splitConst(x.value, a, dims as number[]) : [];
    return dims.map((p, i) => { const o = [...s]; o[a] = p; return known(x.type.dtype, o, vs[i]); });
  },
});

export const rules: OpRule[] = [concat, split(1), split(2), split(13), split(18)];

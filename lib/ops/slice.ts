// Slice: starts/ends/axes attributes before opset 10, inputs (with steps) after.
// Indices are clamped the ONNX way (INT64_MAX/MIN mean "to the end"); the result
// folds, which is how exporters pick dims out of a Shape.
import type { Dim } from '../graph/ir.js';
import type { OpRule, InferCtx, Known } from './rule.js';
import { axis, isNum, known } from './rule.js';
import { dimAdd, flat, given, iota, intsIn, remap, strides } from './fold-move.js';

const BIG = 2 ** 31 - 1; // exporters write INT32_MAX or INT64_MAX for "to the end"

/** First index and length of one sliced axis of size d. */
export function sliceAxis(d: number, start: number, end: number, step: number): [number, number] {
  if (step === 0) throw new RangeError('Slice step is 0');
  let s = start < 0 ? start + d : start, e = end < 0 ? end + d : end;
  if (step > 0) { s = Math.min(Math.max(s, 0), d); e = Math.min(Math.max(e, 0), d); }
  else { s = Math.min(Math.max(s, 0), d - 1); e = Math.min(Math.max(e, -1), d - 1); }
  return [s, Math.max(0, Math.ceil((e - s) / step))];
}

function sliceWith(c: InferCtx, starts?: number[], ends?: number[], axes?: number[], steps?: number[]): (Known | undefined)[] {
  const x = c.inputs[0], s = x?.type.shape;
  if (!x || !s || !starts || !ends || !axes || !steps) return [];
  const r = s.length;
  const ax = axes.length ? axes.map((a) => axis(a, r)) : iota(starts.length);
  const st = steps.length ? steps : ax.map(() => 1);
  if (starts.length !== ax.length || ends.length !== ax.length || st.length !== ax.length) throw new RangeError('Slice starts/ends/axes/steps lengths differ');
  if (new Set(ax).size !== ax.length) throw new RangeError(`repeated Slice axes ${axes}`);
  const out: Dim[] = [...s];
  const first = new Array<number>(r).fill(0), step = new Array<number>(r).fill(1);
  ax.forEach((a, i) => {
    const d = s[a];
    if (isNum(d)) { const [f, n] = sliceAxis(d, starts[i], ends[i], st[i]); out[a] = n; first[a] = f; step[a] = st[i]; return; }
    // A symbolic dim: only an open-ended forward slice keeps a derived size.
    out[a] = st[i] === 1 && starts[i] >= 0 && ends[i] >= BIG ? dimAdd(d, -starts[i]) : c.fresh('slice');
  });
  const v = x.value;
  let folded;
  if (v && out.every(isNum)) {
    const vst = strides(v.dims);
    folded = remap(v, out as number[], (idx) => flat(idx.map((i, k) => first[k] + i * step[k]), vst));
  }
  return [known(x.type.dtype, out, folded)];
}

const slice1: OpRule = {
  op: 'Slice',
  infer: (c) => sliceWith(c, c.ints('starts'), c.ints('ends'), c.ints('axes', []), []),
};
const slice10: OpRule = {
  op: 'Slice',
  since: 10,
  infer: (c) => {
    if (!given(c, 1) || !given(c, 2)) return [];
    return sliceWith(c, intsIn(c, 1), intsIn(c, 2), intsIn(c, 3), intsIn(c, 4));
  },
};

export const rules: OpRule[] = [slice1, slice10];

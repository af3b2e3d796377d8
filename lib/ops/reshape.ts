// Reshape, Flatten, Squeeze, Unsqueeze: new dims over the same data, so a folded
// input keeps its values. Symbolic dims survive where the arithmetic cancels
// (e.g. [N,3,4] → [0,-1] gives [N,12]).
import type { Dim } from '../graph/ir.js';
import type { OpRule, InferCtx, Known } from './rule.js';
import { axis, dimMul, isNum, known } from './rule.js';
import { dimProd, intsIn, redim } from './fold-move.js';

/** num / den over dims, cancelling equal symbols; undefined when it does not reduce. */
function quotient(num: readonly Dim[], den: readonly Dim[]): Dim | undefined {
  const syms = num.filter((d) => !isNum(d)) as string[];
  let n = 1, m = 1;
  for (const d of num) if (isNum(d)) n *= d;
  for (const d of den) {
    if (isNum(d)) { m *= d; continue; }
    const k = syms.indexOf(d);
    if (k < 0) return undefined;
    syms.splice(k, 1);
  }
  if (m === 0) return undefined;
  if (n % m) { if (syms.length) return undefined; throw new RangeError(`cannot reshape ${n} elements into a multiple of ${m}`); }
  return syms.reduce<Dim>((a, s) => dimMul(a, s), n / m);
}

function reshapeTo(c: InferCtx, target: number[] | undefined, allowzero: boolean): (Known | undefined)[] {
  const x = c.inputs[0];
  if (!x || !target) return [];
  const ins = x.type.shape;
  const out: Dim[] = [];
  for (let i = 0; i < target.length; i++) {
    const t = target[i];
    if (t === 0 && !allowzero) { if (!ins || i >= ins.length) return []; out.push(ins[i]); }
    else if (t < -1) throw new RangeError(`invalid Reshape dim ${t}`);
    else out.push(t);
  }
  const hole = out.indexOf(-1);
  if (hole >= 0) {
    if (out.indexOf(-1, hole + 1) >= 0) throw new RangeError('Reshape has more than one -1');
    if (!ins) return [];
    out[hole] = quotient(ins, out.filter((_, i) => i !== hole)) ?? c.fresh('reshape');
  }
  return [known(x.type.dtype, out, redim(x.value, out))];
}

const reshape = (since: number): OpRule => ({
  op: 'Reshape',
  since,
  infer: (c) => since < 5 ? reshapeTo(c, c.ints('shape'), false) : reshapeTo(c, intsIn(c, 1), since >= 14 && c.int('allowzero', 0) === 1),
});

// Negative axis since opset 11; axis == rank is allowed and gives [N, 1].
const flatten: OpRule = {
  op: 'Flatten',
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    let a = c.int('axis', 1);
    if (a < 0) a += s.length;
    if (a < 0 || a > s.length) throw new RangeError(`Flatten axis ${a} out of range for rank ${s.length}`);
    const out = [dimProd(s.slice(0, a)), dimProd(s.slice(a))];
    return [known(x.type.dtype, out, redim(x.value, out))];
  },
};

// Axes move from an attribute to an input at opset 13.
const squeeze = (since: number): OpRule => ({
  op: 'Squeeze',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    const axes = since >= 13 ? intsIn(c, 1) : c.ints('axes', []);
    if (!x || !s || !axes) return [];
    let out: Dim[];
    if (axes.length) {
      const ax = new Set(axes.map((a) => axis(a, s.length)));
      for (const a of ax) if (isNum(s[a]) && s[a] !== 1) throw new RangeError(`Squeeze of dim ${a} of size ${s[a]}`);
      out = s.filter((_, i) => !ax.has(i));
    } else {
      if (!s.every(isNum)) return []; // a symbol might be 1
      out = s.filter((d) => d !== 1);
    }
    return [known(x.type.dtype, out, redim(x.value, out))];
  },
});

const unsqueeze = (since: number): OpRule => ({
  op: 'Unsqueeze',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    const axes = since >= 13 ? intsIn(c, 1) : c.ints('axes', []);
    if (!x || !s || !axes) return [];
    const r = s.length + axes.length;
    const ax = new Set(axes.map((a) => axis(a, r)));
    if (ax.size !== axes.length) throw new RangeError(`repeated Unsqueeze axes ${axes}`);
    let j = 0;
    const out = Array.from({ length: r }, (_, i): Dim => (ax.has(i) ? 1 : s[j++]));
    return [known(x.type.dtype, out, redim(x.value, out))];
  },
});

export const rules: OpRule[] = [
  reshape(1), reshape(5), reshape(14), flatten,
  squeeze(1), squeeze(13), unsqueeze(1), unsqueeze(13),
];

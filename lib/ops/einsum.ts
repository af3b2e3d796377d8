// Einsum: numpy equation semantics (ONNX operator spec). An implicit output is the
// broadcast '...' dims followed by the letters used exactly once, in ASCII order.
//
// Cost convention (ours, stated so totals can be compared): with two or more
// operands, einsum is costed as its naive loop nest, one MAC per point of the joint
// index space (every distinct letter plus the '...' dims). Pairwise contraction
// orders can beat this for three or more operands; a two-operand product (matmul,
// batched matmul, inner/outer product) gets exactly its textbook count. A single
// operand does no multiplication: summed-out letters cost one add per index point,
// and pure transposes or diagonals cost nothing.
import type { Dim } from '../graph/ir.js';
import type { OpRule } from './rule.js';
import { broadcast, isNum, known, prod } from './rule.js';

const ELL = '.';
type Term = string[]; // letters, with ELL standing for the whole '...'

function parseTerm(t: string): Term {
  const out: Term = [];
  for (let i = 0; i < t.length; i++) {
    if (t.startsWith('...', i)) { if (out.includes(ELL)) throw new SyntaxError(`Einsum term '${t}' has two ellipses`); out.push(ELL); i += 2; continue; }
    if (!/[A-Za-z]/.test(t[i])) throw new SyntaxError(`Einsum term '${t}' has '${t[i]}'`);
    out.push(t[i]);
  }
  return out;
}

interface Plan { sizes: Map<string, Dim>; ell: Dim[]; out: Dim[]; summed: boolean }

export function einsumPlan(equation: string, shapes: Dim[][]): Plan {
  const eq = equation.replace(/\s+/g, '');
  const [lhs, rhs] = eq.split('->');
  const terms = lhs.split(',').map(parseTerm);
  if (terms.length !== shapes.length) throw new RangeError(`Einsum equation has ${terms.length} operands, node has ${shapes.length}`);
  const sizes = new Map<string, Dim>();
  const ells: Dim[][] = [];
  terms.forEach((t, i) => {
    const s = shapes[i], letters = t.filter((x) => x !== ELL).length, nEll = s.length - letters;
    if (nEll < 0 || (nEll > 0 && !t.includes(ELL))) throw new RangeError(`Einsum term '${t.join('')}' does not fit rank ${s.length}`);
    let k = 0;
    for (const x of t) {
      if (x === ELL) { ells.push(s.slice(k, k + nEll)); k += nEll; continue; }
      const d = s[k++], prev = sizes.get(x);
      // A letter of size 1 broadcasts (numpy); otherwise sizes must agree, numbers beating symbols.
      if (prev === undefined || prev === 1 || (!isNum(prev) && isNum(d))) sizes.set(x, d);
      else if (isNum(prev) && isNum(d) && d !== prev && d !== 1) throw new RangeError(`Einsum letter ${x} is both ${prev} and ${d}`);
    }
  });
  const ell = broadcast(...ells);
  if (!ell) throw new RangeError('Einsum ellipsis dims do not broadcast');
  const used = terms.flat();
  const outTerm = rhs !== undefined ? parseTerm(rhs)
    : [...(used.includes(ELL) ? [ELL] : []), ...[...sizes.keys()].filter((x) => used.filter((y) => y === x).length === 1).sort()];
  const out = outTerm.flatMap((x): Dim[] => {
    if (x === ELL) return ell;
    const d = sizes.get(x);
    if (d === undefined) throw new RangeError(`Einsum output letter ${x} is not in any input`);
    return [d];
  });
  const summed = [...sizes.keys()].some((x) => !outTerm.includes(x)) || (ell.length > 0 && !outTerm.includes(ELL));
  return { sizes, ell, out, summed };
}

const einsum: OpRule = {
  op: 'Einsum',
  since: 12,
  infer: (c) => {
    const eq = c.str('equation');
    const shapes = c.inputs.map((k) => k?.type.shape);
    if (eq === undefined || !shapes.length || shapes.some((s) => !s)) return [];
    return [known(c.inputs[0]!.type.dtype, einsumPlan(eq, shapes as Dim[][]).out)];
  },
  cost: (c) => {
    const p = einsumPlan(c.str('equation', ''), c.inputs as number[][]);
    const space = prod([...p.sizes.values(), ...p.ell] as number[]);
    if (c.inputs.length >= 2) return { macs: space, ops: 0n };
    return { macs: 0n, ops: p.summed ? space : 0n };
  },
};

export const rules: OpRule[] = [einsum];

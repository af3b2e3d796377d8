// Control flow. If takes its output types from the branches' declared outputs
// (the taken branch when the condition folds; otherwise dims the branches agree
// on, fresh symbols where they differ). Loop and Scan are typed only in the
// trivial cases: carried values whose declared shape does not change, and scan
// outputs whose per-iteration shape is declared and whose count is known.
import type { Dim, Graph, TensorType } from '../graph/ir.js';
import type { OpRule, InferCtx, Known } from './rule.js';
import { axis, known } from './rule.js';
import { anonymous, given } from './fold-move.js';

const body = (c: InferCtx, name: string): Graph | undefined => c.node.bodies.get(name)?.[0];
const declared = (t: TensorType | undefined): Known | undefined => (t?.shape ? known(t.dtype, t.shape) : undefined);
const sameShape = (a: Dim[] | undefined, b: Dim[] | undefined) => !!a && !!b && a.length === b.length && a.every((d, i) => d === b[i] && !anonymous(d));

function merge(c: InferCtx, a: TensorType | undefined, b: TensorType | undefined): Known | undefined {
  if (!a?.shape || !b?.shape || a.shape.length !== b.shape.length) return undefined;
  return known(a.dtype, a.shape.map((d, i) => (d === b.shape![i] && !anonymous(d) ? d : c.fresh('if'))));
}

const ifRule: OpRule = {
  op: 'If',
  infer: (c) => {
    const t = body(c, 'then_branch'), e = body(c, 'else_branch');
    if (!t || !e) return [];
    const cond = c.inputs[0]?.value?.data[0];
    if (cond !== undefined) return (cond ? t : e).outputs.map((o) => declared(o.type));
    return t.outputs.map((o, i) => merge(c, o.type, e.outputs[i]?.type));
  },
};

/** The body hands its condition input straight back (directly or through Identity). */
function passesCond(g: Graph): boolean {
  const cin = g.inputs[1]?.name, cout = g.outputs[0]?.name;
  return !!cin && (cout === cin || g.nodes.some((n) => n.op === 'Identity' && n.inputs[0] === cin && n.outputs[0] === cout));
}

// Inputs M, cond, carried...; body outputs cond, carried..., scan slices...
const loop: OpRule = {
  op: 'Loop',
  infer: (c) => {
    const g = body(c, 'body');
    if (!g) return [];
    const carried = c.inputs.slice(2);
    const outs: (Known | undefined)[] = carried.map((k, i) => {
      const t = g.outputs[1 + i]?.type;
      return k?.type.shape && sameShape(k.type.shape, t?.shape) ? known(k.type.dtype, k.type.shape) : undefined;
    });
    // A scan output has one slice per iteration: sure only with a folded trip count and a condition that cannot stop early.
    const m = !given(c, 1) || (c.inputs[1]?.value?.data[0] && passesCond(g)) ? c.inputs[0]?.value?.data[0] : undefined;
    for (const o of g.outputs.slice(1 + carried.length)) {
      const s = o.type?.shape;
      outs.push(m !== undefined && s && !s.some(anonymous) ? known(o.type!.dtype, [m, ...s]) : undefined);
    }
    return outs;
  },
};

// Scan 9+: inputs are N states then M scan inputs; body outputs N states then K scan slices.
const scan: OpRule = {
  op: 'Scan',
  since: 9,
  infer: (c) => {
    const g = body(c, 'body');
    const m = c.int('num_scan_inputs');
    if (!g || m === undefined) return [];
    const n = c.inputs.length - m;
    const outs: (Known | undefined)[] = c.inputs.slice(0, n).map((k) => (k?.type.shape ? known(k.type.dtype, k.type.shape) : undefined));
    const first = c.inputs[n]?.type.shape;
    const inAxis = c.ints('scan_input_axes')?.[0] ?? 0;
    const len = first ? first[axis(inAxis, first.length)] : undefined;
    const outAxes = c.ints('scan_output_axes', []);
    g.outputs.slice(n).forEach((o, j) => {
      const s = o.type?.shape;
      if (len === undefined || !s || s.some(anonymous)) { outs.push(undefined); return; }
      const a = axis(outAxes[j] ?? 0, s.length + 1);
      outs.push(known(o.type!.dtype, [...s.slice(0, a), len, ...s.slice(a)]));
    });
    return outs;
  },
};

// Scan-8 carries a batch axis and sequence_lens; not typed.
const scan8: OpRule = { op: 'Scan', since: 8, infer: () => [] };

export const rules: OpRule[] = [ifRule, loop, scan8, scan];

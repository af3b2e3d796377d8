// Reductions: Reduce* (axes attribute; an input from opset 13 for ReduceSum and
// from 18 for the rest, with noop_with_empty_axes) and ArgMax/ArgMin. They fold on
// small constants (ReduceProd of a Shape slice is a common exporter pattern).
// Cost: one operation per input element.
import type { Const, CostCtx, OpRule, InferCtx, Known } from './rule.js';
import { axis, known, numel } from './rule.js';
import { isIntType } from './fold.js';
import { INT64 } from '../onnx/dtype.js';
import { FOLD_LIMIT, count, eachIndex, iota, intsIn, strides } from './fold-move.js';

type Reducer = (xs: number[]) => number;
const sum = (xs: number[]) => xs.reduce((a, b) => a + b, 0);

export function foldReduce(v: Const, ax: Set<number>, keep: boolean, fn: Reducer, dtype = v.dtype): Const | undefined {
  if (count(v.dims) > FOLD_LIMIT) return undefined;
  const kept = v.dims.map((d, i) => (ax.has(i) ? 1 : d));
  const st = strides(kept).map((s, i) => (ax.has(i) ? 0 : s));
  const groups: number[][] = Array.from({ length: count(kept) }, () => []);
  eachIndex(v.dims, (idx, k) => { groups[idx.reduce((o, x, i) => o + x * st[i], 0)].push(v.data[k]); });
  const data = groups.map(fn).map((x) => (isIntType(dtype) && Number.isFinite(x) ? Math.trunc(x) : x));
  return { dtype, dims: keep ? kept : v.dims.filter((_, i) => !ax.has(i)), data };
}

function reduceOver(c: InferCtx, axes: number[] | undefined, noop: boolean, fn: Reducer, dtype?: number): (Known | undefined)[] {
  const x = c.inputs[0], s = x?.type.shape;
  if (!x || !s || !axes) return [];
  if (!axes.length && noop) return [{ ...x }];
  const keep = c.int('keepdims', 1) === 1;
  const ax = new Set(axes.length ? axes.map((a) => axis(a, s.length)) : iota(s.length));
  const out = keep ? s.map((d, i) => (ax.has(i) ? 1 : d)) : s.filter((_, i) => !ax.has(i));
  const dt = dtype ?? x.type.dtype;
  return [known(dt, out, x.value && foldReduce(x.value, ax, keep, fn, dt))];
}

const inputCost = (c: CostCtx) => ({ macs: 0n, ops: c.inputs[0] ? numel(c.inputs[0]) : 0n });

const reduce = (op: string, fn: Reducer, axesInputSince: number): OpRule[] => [
  { op, infer: (c) => reduceOver(c, c.ints('axes', []), false, fn), cost: inputCost },
  { op, since: axesInputSince, infer: (c) => reduceOver(c, intsIn(c, 1), c.int('noop_with_empty_axes', 0) === 1, fn), cost: inputCost },
];

const REDUCERS: [string, Reducer][] = [
  ['ReduceMean', (xs) => sum(xs) / xs.length],
  ['ReduceMax', (xs) => Math.max(...xs)], ['ReduceMin', (xs) => Math.min(...xs)],
  ['ReduceProd', (xs) => xs.reduce((a, b) => a * b, 1)],
  ['ReduceL1', (xs) => sum(xs.map(Math.abs))], ['ReduceL2', (xs) => Math.sqrt(sum(xs.map((x) => x * x)))],
  ['ReduceLogSum', (xs) => Math.log(sum(xs))], ['ReduceLogSumExp', (xs) => Math.log(sum(xs.map(Math.exp)))],
  ['ReduceSumSquare', (xs) => sum(xs.map((x) => x * x))],
];

// Index of the first (or, with select_last_index, last) extreme along one axis.
const arg = (op: string, better: (a: number, b: number) => boolean): OpRule => ({
  op,
  infer: (c) => {
    const last = c.int('select_last_index', 0) === 1;
    const pick: Reducer = (xs) => xs.reduce((bi, x, i) => (better(x, xs[bi]) || (last && x === xs[bi]) ? i : bi), 0);
    return reduceOver(c, [c.int('axis', 0)], false, pick, INT64);
  },
  cost: inputCost,
});

export const rules: OpRule[] = [
  ...reduce('ReduceSum', sum, 13),
  ...REDUCERS.flatMap(([op, fn]) => reduce(op, fn, 18)),
  arg('ArgMax', (a, b) => a > b), arg('ArgMin', (a, b) => a < b),
];

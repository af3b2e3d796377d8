// Folding for data-movement and shape ops. Values move, they are not computed,
// so any small constant (shape vectors, index tables, weights up to the limit)
// folds exactly; that keeps Shape→Gather→Concat→Reshape chains static.
import type { Dim } from '../graph/ir.js';
import type { Const, InferCtx, Known } from './rule.js';
import { dimMul, isNum, known } from './rule.js';
import { INT64 } from '../onnx/dtype.js';

export const FOLD_LIMIT = 1 << 16;

export const allNum = (ds: readonly Dim[] | undefined): ds is number[] => !!ds && ds.every(isNum);
export const count = (dims: readonly number[]): number => dims.reduce((a, b) => a * b, 1);
export const iota = (n: number): number[] => Array.from({ length: n }, (_, i) => i);
export function strides(dims: readonly number[]): number[] {
  const s = new Array<number>(dims.length);
  for (let i = dims.length - 1, acc = 1; i >= 0; i--) { s[i] = acc; acc *= dims[i]; }
  return s;
}
export const flat = (idx: readonly number[], st: readonly number[]): number => idx.reduce((s, i, k) => s + i * st[k], 0);

/** Visit every multi-index of `dims` in row-major order (the array is reused). */
export function eachIndex(dims: readonly number[], fn: (idx: number[], k: number) => void): void {
  const n = count(dims);
  const idx = new Array<number>(dims.length).fill(0);
  for (let k = 0; k < n; k++) {
    fn(idx, k);
    for (let d = dims.length - 1; d >= 0; d--) { if (++idx[d] < dims[d]) break; idx[d] = 0; }
  }
}

/** A Const of `dims` whose element at idx is src.data[at(idx)]; undefined past the fold limit. */
export function remap(src: Const, dims: number[], at: (idx: number[]) => number, dtype = src.dtype): Const | undefined {
  if (count(dims) > FOLD_LIMIT) return undefined;
  const data = new Array<number>(count(dims));
  let ok = true;
  eachIndex(dims, (idx, k) => { const v = src.data[at(idx)]; if (v === undefined) ok = false; data[k] = v; });
  return ok ? { dtype, dims, data } : undefined;
}

export const valued = (v: Const): Known => known(v.dtype, v.dims, v);
export const int64s = (xs: number[]): Const => ({ dtype: INT64, dims: [xs.length], data: xs });
/** The same values under new dims (Reshape and friends share the data). */
export const redim = (v: Const | undefined, dims: Dim[]): Const | undefined => (v && allNum(dims) ? { ...v, dims } : undefined);

/** Whether input slot i is given (absent or '' means omitted). */
export const given = (c: InferCtx, i: number): boolean => !!c.node.inputs[i];
/** Input i is known to hold no elements (an "empty" optional, e.g. Resize scales or Reduce axes). */
export const isEmpty = (k: Known | undefined): boolean => !!k?.type.shape?.some((d) => d === 0);
/** An integer operand (axes, pads, a shape) from input i: [] when omitted or empty, undefined when not folded. */
export function intsIn(c: InferCtx, i: number): number[] | undefined {
  if (!given(c, i)) return [];
  const k = c.inputs[i];
  if (k?.value) return k.value.data.map(Math.trunc);
  return isEmpty(k) ? [] : undefined;
}

export function dimAdd(a: Dim, b: number): Dim {
  if (isNum(a)) return a + b;
  return b === 0 ? a : b > 0 ? `${a}+${b}` : `${a}-${-b}`;
}
export const dimProd = (ds: readonly Dim[]): Dim => ds.reduce<Dim>((a, b) => dimMul(a, b), 1);
export function dimSum(ds: readonly Dim[]): Dim {
  const n = ds.filter(isNum).reduce((a, b) => a + b, 0);
  const syms = ds.filter((d) => !isNum(d));
  return syms.length ? [...syms, ...(n ? [n] : [])].join('+') : n;
}
/** Declared dims like '?0' stand for "no value, no name": never equal to anything. */
export const anonymous = (d: Dim): boolean => typeof d === 'string' && d.startsWith('?');

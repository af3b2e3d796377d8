// Constant folding helpers for shape arithmetic (small integer tensors).
import type { Const } from './rule.js';
import { broadcast } from './rule.js';

const MAX_FOLD = 1 << 16;

/** Elementwise op over broadcast constants; undefined when an input is unknown or large. */
export function foldElementwise(dtype: number, xs: (Const | undefined)[], fn: (...v: number[]) => number): Const | undefined {
  if (xs.some((x) => !x)) return undefined;
  const cs = xs as Const[];
  const dims = broadcast(...cs.map((c) => c.dims)) as number[] | undefined;
  if (!dims) return undefined;
  const n = dims.reduce((a, b) => a * b, 1);
  if (n > MAX_FOLD) return undefined;
  const strides = cs.map((c) => {
    const off = dims.length - c.dims.length;
    const s = new Array(dims.length).fill(0);
    let acc = 1;
    for (let i = c.dims.length - 1; i >= 0; i--) { s[i + off] = c.dims[i] === 1 ? 0 : acc; acc *= c.dims[i]; }
    return s;
  });
  const data = new Array(n);
  const idx = new Array(dims.length).fill(0);
  for (let k = 0; k < n; k++) {
    data[k] = fn(...cs.map((c, j) => { let o = 0; for (let d = 0; d < dims.length; d++) o += idx[d] * strides[j][d]; return c.data[o]; }));
    for (let d = dims.length - 1; d >= 0; d--) { if (++idx[d] < dims[d]) break; idx[d] = 0; }
  }
  return { dtype, dims, data: isIntType(dtype) ? data.map(truncInt) : data };
}

const truncInt = (v: number) => (Number.isFinite(v) ? Math.trunc(v) : v);
export const isIntType = (dt: number) => [2, 3, 4, 5, 6, 7, 12, 13].includes(dt);

// int8 Concat, Transpose and the parts of a Split: the reference of offramp_layout.c.
import { toInt8 } from './requant.js';
import type { ConcatParams, SliceParams, TransposeParams } from './types.js';

export function concat(p: ConcatParams, xs: Int8Array[], y: Int8Array): void {
  let out = 0;
  for (let o = 0; o < p.outer; o++) {
    p.parts.forEach((part, k) => {
      const x = xs[k], at = o * part.block;
      for (let i = 0; i < part.block; i++) y[out++] = part.copy ? x[at + i] : toInt8(x[at + i] - part.inZero, part.mul, p.outZero, p.lo, p.hi);
    });
  }
}

export function transpose(p: TransposeParams, x: Int8Array, y: Int8Array): void {
  const rank = p.dims.length, idx = new Array(rank).fill(0);
  for (let i = 0; i < p.n; i++) {
    let off = 0;
    for (let d = 0; d < rank; d++) off += idx[d] * p.strides[d];
    y[i] = x[off];
    for (let d = rank - 1; d >= 0; d--) { if (++idx[d] < p.dims[d]) break; idx[d] = 0; }
  }
}

export function slice(p: SliceParams, x: Int8Array, y: Int8Array): void {
  let out = 0;
  for (let o = 0; o < p.outer; o++) {
    const at = o * p.inRow + p.start;
    for (let i = 0; i < p.block; i++) y[out++] = p.copy ? x[at + i] : toInt8(x[at + i] - p.inZero, p.mul, p.outZero, p.lo, p.hi);
  }
}

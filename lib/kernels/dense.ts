// int8 Gemm / MatMul on one row: the reference of offramp_dense.c.
import { toInt8 } from './requant.js';
import type { DenseParams } from './types.js';

export function dense(p: DenseParams, x: Int8Array, y: Int8Array): void {
  for (let o = 0; o < p.out; o++) {
    let acc = p.bias[o];
    const w = o * p.in;
    for (let i = 0; i < p.in; i++) acc += x[i] * p.weight[w + i];
    y[o] = toInt8(acc, p.mul[o], p.outZero, p.lo, p.hi);
  }
}

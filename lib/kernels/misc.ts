// Rescaling and input quantization: the reference of offramp_misc.c.
import { quantizeValue, toInt8 } from './requant.js';
import type { RescaleParams } from './types.js';

export function rescale(p: RescaleParams, x: Int8Array, y: Int8Array): void {
  for (let i = 0; i < p.n; i++) y[i] = toInt8(x[i] - p.inZero, p.mul, p.outZero, p.lo, p.hi);
}

/** A float32 frame to int8 with the input's scale and zero point (QuantizeLinear). */
export function quantizeInput(x: ArrayLike<number>, scale: number, zeroPoint: number, y: Int8Array): void {
  for (let i = 0; i < y.length; i++) y[i] = quantizeValue(x[i], scale, zeroPoint);
}

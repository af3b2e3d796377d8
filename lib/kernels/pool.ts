// int8 MaxPool and AveragePool: the reference of offramp_pool.c.
import { toInt8 } from './requant.js';
import type { PoolParams } from './types.js';

export function maxpool(p: PoolParams, x: Int8Array, y: Int8Array): void {
  let out = 0;
  for (let c = 0; c < p.c; c++) {
    const base = c * p.inH * p.inW;
    for (let oy = 0; oy < p.outH; oy++) for (let ox = 0; ox < p.outW; ox++) {
      let best = -128;
      for (let ky = 0; ky < p.kH; ky++) {
        const iy = oy * p.strideH - p.padTop + ky * p.dilH;
        if (iy < 0 || iy >= p.inH) continue;
        for (let kx = 0; kx < p.kW; kx++) {
          const ix = ox * p.strideW - p.padLeft + kx * p.dilW;
          if (ix >= 0 && ix < p.inW && x[base + iy * p.inW + ix] > best) best = x[base + iy * p.inW + ix];
        }
      }
      y[out++] = best;
    }
  }
}

export function avgpool(p: PoolParams, x: Int8Array, y: Int8Array): void {
  let out = 0;
  for (let c = 0; c < p.c; c++) {
    const base = c * p.inH * p.inW;
    for (let oy = 0; oy < p.outH; oy++) for (let ox = 0; ox < p.outW; ox++) {
      let sum = 0, count = 0;
      for (let ky = 0; ky < p.kH; ky++) {
        const iy = oy * p.strideH - p.padTop + ky * p.dilH;
        for (let kx = 0; kx < p.kW; kx++) {
          const ix = ox * p.strideW - p.padLeft + kx * p.dilW;
          if (iy >= 0 && iy < p.inH && ix >= 0 && ix < p.inW) { sum += x[base + iy * p.inW + ix] - p.inZero; count++; }
          else if (p.includePad && iy < p.inH + p.padBottom && ix < p.inW + p.padRight) count++;
        }
      }
      y[out++] = count ? toInt8(sum, p.mul[count], p.outZero, p.lo, p.hi) : p.outZero;
    }
  }
}

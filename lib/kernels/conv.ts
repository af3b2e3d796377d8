// int8 convolution: the reference of offramp_conv.c (same sums, same requantization). Padded taps
// read the input zero point, which the folded bias cancels.
import { toInt8 } from './requant.js';
import type { ConvParams } from './types.js';

export function conv(p: ConvParams, x: Int8Array, y: Int8Array): void {
  const cin = p.inC / p.groups, cout = p.outC / p.groups, hw = p.inH * p.inW;
  const wsize = cin * p.kH * p.kW;
  let out = 0;
  for (let o = 0; o < p.outC; o++) {
    const xg = Math.floor(o / cout) * cin * hw, w = o * wsize;
    for (let oy = 0; oy < p.outH; oy++) {
      const iy0 = oy * p.strideH - p.padTop;
      for (let ox = 0; ox < p.outW; ox++) {
        const ix0 = ox * p.strideW - p.padLeft;
        let acc = 0;
        for (let c = 0; c < cin; c++) {
          for (let ky = 0; ky < p.kH; ky++) {
            const iy = iy0 + ky * p.dilH, wr = w + (c * p.kH + ky) * p.kW;
            for (let kx = 0; kx < p.kW; kx++) {
              const ix = ix0 + kx * p.dilW;
              const v = iy < 0 || iy >= p.inH || ix < 0 || ix >= p.inW ? p.inZero : x[xg + c * hw + iy * p.inW + ix];
              acc += v * p.weight[wr + kx];
            }
          }
        }
        y[out++] = toInt8(p.bias[o] + acc, p.mul[o], p.outZero, p.lo, p.hi);
      }
    }
  }
}

/* offramp_pool.c: int8 MaxPool and AveragePool, portable C. The TypeScript reference is lib/kernels/pool.ts. */
#include "offramp_kernels.h"

void offramp_maxpool(const offramp_pool_t *p, const int8_t *x, int8_t *y) {
  int32_t c, oy, ox, ky, kx;
  for (c = 0; c < p->c; c++, x += p->in_h * p->in_w)
    for (oy = 0; oy < p->out_h; oy++)
      for (ox = 0; ox < p->out_w; ox++) {
        int32_t best = -128;
        for (ky = 0; ky < p->k_h; ky++) {
          const int32_t iy = oy * p->stride_h - p->pad_top + ky * p->dil_h;
          if (iy < 0 || iy >= p->in_h) continue;
          for (kx = 0; kx < p->k_w; kx++) {
            const int32_t ix = ox * p->stride_w - p->pad_left + kx * p->dil_w;
            if (ix >= 0 && ix < p->in_w && x[iy * p->in_w + ix] > best) best = x[iy * p->in_w + ix];
          }
        }
        *y++ = (int8_t)best;
      }
}

void offramp_avgpool(const offramp_pool_t *p, const int8_t *x, int8_t *y) {
  int32_t c, oy, ox, ky, kx;
  for (c = 0; c < p->c; c++, x += p->in_h * p->in_w)
    for (oy = 0; oy < p->out_h; oy++)
      for (ox = 0; ox < p->out_w; ox++) {
        int32_t sum = 0, count = 0;
        for (ky = 0; ky < p->k_h; ky++) {
          const int32_t iy = oy * p->stride_h - p->pad_top + ky * p->dil_h;
          for (kx = 0; kx < p->k_w; kx++) {
            const int32_t ix = ox * p->stride_w - p->pad_left + kx * p->dil_w;
            if (iy >= 0 && iy < p->in_h && ix >= 0 && ix < p->in_w) { sum += x[iy * p->in_w + ix] - p->in_zero; count++; }
            else if (p->include_pad && iy < p->in_h + p->pad_bottom && ix < p->in_w + p->pad_right) count++;
          }
        }
        *y++ = count ? offramp_to_int8(sum, p->mul[count], p->out_zero, p->lo, p->hi) : (int8_t)p->out_zero;
      }
}

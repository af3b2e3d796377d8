/* offramp_pool.c: int8 MaxPool and AveragePool, portable C. The TypeScript reference is lib/kernels/pool.ts.
 * A window wholly inside the input takes a loop without bounds tests; parameters are held in locals
 * (a store through int8_t may alias them). */
#include "offramp_kernels.h"

void offramp_maxpool(const offramp_pool_t *p, const int8_t *x, int8_t *y) {
  const int32_t c_n = p->c, in_h = p->in_h, in_w = p->in_w, out_h = p->out_h, out_w = p->out_w;
  const int32_t k_h = p->k_h, k_w = p->k_w, s_h = p->stride_h, s_w = p->stride_w, d_h = p->dil_h, d_w = p->dil_w;
  const int32_t pad_top = p->pad_top, pad_left = p->pad_left;
  int32_t c, oy, ox, ky, kx;
  for (c = 0; c < c_n; c++, x += in_h * in_w)
    for (oy = 0; oy < out_h; oy++) {
      const int32_t iy0 = oy * s_h - pad_top;
      const int rows_in = iy0 >= 0 && iy0 + (k_h - 1) * d_h < in_h;
      for (ox = 0; ox < out_w; ox++) {
        const int32_t ix0 = ox * s_w - pad_left;
        int32_t best = -128;
        if (rows_in && ix0 >= 0 && ix0 + (k_w - 1) * d_w < in_w) {
          const int8_t *r = x + iy0 * in_w + ix0;
          if (k_h == 2 && k_w == 2 && d_h == 1 && d_w == 1) {
            /* the common 2x2 window: four loads, three comparisons */
            const int32_t a = r[0] > r[1] ? r[0] : r[1], b = r[in_w] > r[in_w + 1] ? r[in_w] : r[in_w + 1];
            best = a > b ? a : b;
          } else {
            for (ky = 0; ky < k_h; ky++, r += d_h * in_w)
              for (kx = 0; kx < k_w; kx++) if (r[kx * d_w] > best) best = r[kx * d_w];
          }
        } else {
          for (ky = 0; ky < k_h; ky++) {
            const int32_t iy = iy0 + ky * d_h;
            if (iy < 0 || iy >= in_h) continue;
            for (kx = 0; kx < k_w; kx++) {
              const int32_t ix = ix0 + kx * d_w;
              if (ix >= 0 && ix < in_w && x[iy * in_w + ix] > best) best = x[iy * in_w + ix];
            }
          }
        }
        *y++ = (int8_t)best;
      }
    }
}

void offramp_avgpool(const offramp_pool_t *p, const int8_t *x, int8_t *y) {
  const int32_t c_n = p->c, in_h = p->in_h, in_w = p->in_w, out_h = p->out_h, out_w = p->out_w;
  const int32_t k_h = p->k_h, k_w = p->k_w, s_h = p->stride_h, s_w = p->stride_w, d_h = p->dil_h, d_w = p->dil_w;
  const int32_t pad_top = p->pad_top, pad_left = p->pad_left, end_h = in_h + p->pad_bottom, end_w = in_w + p->pad_right;
  const int32_t in_zero = p->in_zero, out_zero = p->out_zero, lo = p->lo, hi = p->hi, include_pad = p->include_pad;
  const offramp_mul_t *mul = p->mul;
  int32_t c, oy, ox, ky, kx;
  for (c = 0; c < c_n; c++, x += in_h * in_w)
    for (oy = 0; oy < out_h; oy++) {
      const int32_t iy0 = oy * s_h - pad_top;
      const int rows_in = iy0 >= 0 && iy0 + (k_h - 1) * d_h < in_h;
      for (ox = 0; ox < out_w; ox++) {
        const int32_t ix0 = ox * s_w - pad_left;
        int32_t sum = 0, count = 0;
        if (rows_in && ix0 >= 0 && ix0 + (k_w - 1) * d_w < in_w) {
          const int8_t *r = x + iy0 * in_w + ix0;
          for (ky = 0; ky < k_h; ky++, r += d_h * in_w)
            for (kx = 0; kx < k_w; kx++) sum += r[kx * d_w];
          count = k_h * k_w;
          sum -= count * in_zero;
        } else {
          for (ky = 0; ky < k_h; ky++) {
            const int32_t iy = iy0 + ky * d_h;
            for (kx = 0; kx < k_w; kx++) {
              const int32_t ix = ix0 + kx * d_w;
              if (iy >= 0 && iy < in_h && ix >= 0 && ix < in_w) { sum += x[iy * in_w + ix] - in_zero; count++; }
              else if (include_pad && iy < end_h && ix < end_w) count++;
            }
          }
        }
        *y++ = count ? offramp_to_int8(sum, mul[count], out_zero, lo, hi) : (int8_t)out_zero;
      }
    }
}

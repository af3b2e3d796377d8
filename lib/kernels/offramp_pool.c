/* offramp_pool.c: int8 MaxPool and AveragePool, portable C. The TypeScript reference is lib/kernels/pool.ts.
 * Each window is clipped to the input once per axis (taps [lo, hi) of its row and column), so no tap is
 * tested for bounds; the common 2x2 max window gets a loop of its own over the outputs whose windows lie
 * inside. Parameters are held in locals (a store through int8_t may alias them). */
#include "offramp_kernels.h"

/* Taps t of [0, k) with 0 <= i0 + t * d < n: [*lo, *hi), empty when *hi <= *lo. */
static void clip(int32_t i0, int32_t k, int32_t d, int32_t n, int32_t *lo, int32_t *hi) {
  const int32_t l = i0 < 0 ? (-i0 + d - 1) / d : 0;
  const int32_t h = i0 > n - 1 ? 0 : (n - 1 - i0) / d + 1;
  *lo = l;
  *hi = h < k ? h : k;
}

/* Taps t of [0, k) with i0 + t * d < end (the padded extent): what count_include_pad counts. */
static int32_t padded(int32_t i0, int32_t k, int32_t d, int32_t end) {
  const int32_t h = i0 > end - 1 ? 0 : (end - 1 - i0) / d + 1;
  return h < k ? h : k;
}

void offramp_maxpool(const offramp_pool_t *p, const int8_t *x, int8_t *y) {
  const int32_t c_n = p->c, in_h = p->in_h, in_w = p->in_w, out_h = p->out_h, out_w = p->out_w;
  const int32_t k_h = p->k_h, k_w = p->k_w, s_h = p->stride_h, s_w = p->stride_w, d_h = p->dil_h, d_w = p->dil_w;
  const int32_t pad_top = p->pad_top, pad_left = p->pad_left;
  const int two = k_h == 2 && k_w == 2 && d_h == 1 && d_w == 1;
  /* outputs [in_lo, in_hi) of a row have their whole window inside it */
  const int32_t in_lo = pad_left <= 0 ? 0 : (pad_left + s_w - 1) / s_w;
  int32_t in_hi = in_w - k_w + pad_left < 0 ? 0 : (in_w - k_w + pad_left) / s_w + 1;
  int32_t c, oy, ox, ky, kx;
  if (in_hi > out_w) in_hi = out_w;
  for (c = 0; c < c_n; c++, x += in_h * in_w)
    for (oy = 0; oy < out_h; oy++) {
      const int32_t iy0 = oy * s_h - pad_top;
      int32_t y_lo, y_hi;
      clip(iy0, k_h, d_h, in_h, &y_lo, &y_hi);
      for (ox = 0; ox < out_w; ox++) {
        const int32_t ix0 = ox * s_w - pad_left;
        int32_t best = -128, x_lo, x_hi;
        if (two && y_lo == 0 && y_hi == 2 && ox == in_lo && in_lo < in_hi) {
          /* the 2x2 windows inside the row: four loads, three comparisons each */
          const int8_t *r = x + iy0 * in_w + ix0;
          for (; ox < in_hi; ox++, r += s_w) {
            const int32_t a = r[0] > r[1] ? r[0] : r[1], b = r[in_w] > r[in_w + 1] ? r[in_w] : r[in_w + 1];
            *y++ = (int8_t)(a > b ? a : b);
          }
          ox--;
          continue;
        }
        clip(ix0, k_w, d_w, in_w, &x_lo, &x_hi);
        for (ky = y_lo; ky < y_hi; ky++) {
          const int8_t *r = x + (iy0 + ky * d_h) * in_w + ix0;
          for (kx = x_lo; kx < x_hi; kx++) if (r[kx * d_w] > best) best = r[kx * d_w];
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
      const int32_t iy0 = oy * s_h - pad_top, ph = padded(iy0, k_h, d_h, end_h);
      int32_t y_lo, y_hi;
      clip(iy0, k_h, d_h, in_h, &y_lo, &y_hi);
      for (ox = 0; ox < out_w; ox++) {
        const int32_t ix0 = ox * s_w - pad_left;
        int32_t sum = 0, count = 0, x_lo, x_hi;
        clip(ix0, k_w, d_w, in_w, &x_lo, &x_hi);
        if (y_hi > y_lo && x_hi > x_lo) {
          for (ky = y_lo; ky < y_hi; ky++) {
            const int8_t *r = x + (iy0 + ky * d_h) * in_w + ix0;
            if (d_w == 1) for (kx = x_lo; kx < x_hi; kx++) sum += r[kx];
            else for (kx = x_lo; kx < x_hi; kx++) sum += r[kx * d_w];
          }
          count = (y_hi - y_lo) * (x_hi - x_lo);
          sum -= count * in_zero;
        }
        if (include_pad) count = ph * padded(ix0, k_w, d_w, end_w);
        *y++ = count ? offramp_to_int8(sum, &mul[count], out_zero, lo, hi) : (int8_t)out_zero;
      }
    }
}

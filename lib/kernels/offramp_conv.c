/* offramp_conv.c: int8 convolution, portable C. The TypeScript reference is lib/kernels/conv.ts. */
#include "offramp_kernels.h"

/* One output position: the window's taps, a padded tap reading the input zero point. */
static int32_t window_sum(const offramp_conv_t *p, const int8_t *x, const int8_t *w, int32_t cin, int32_t iy0, int32_t ix0) {
  int32_t acc = 0, c, ky, kx;
  const int32_t hw = p->in_h * p->in_w;
  for (c = 0; c < cin; c++) {
    const int8_t *xc = x + c * hw;
    for (ky = 0; ky < p->k_h; ky++) {
      const int32_t iy = iy0 + ky * p->dil_h;
      const int8_t *wr = w + (c * p->k_h + ky) * p->k_w;
      if (iy < 0 || iy >= p->in_h) {
        for (kx = 0; kx < p->k_w; kx++) acc += p->in_zero * wr[kx];
        continue;
      }
      for (kx = 0; kx < p->k_w; kx++) {
        const int32_t ix = ix0 + kx * p->dil_w;
        acc += (ix < 0 || ix >= p->in_w ? p->in_zero : xc[iy * p->in_w + ix]) * wr[kx];
      }
    }
  }
  return acc;
}

/* The same sum where every tap is inside the input: no bounds tests in the inner loops. */
static int32_t window_sum_inside(const offramp_conv_t *p, const int8_t *x, const int8_t *w, int32_t cin, int32_t iy0, int32_t ix0) {
  int32_t acc = 0, c, ky, kx;
  const int32_t hw = p->in_h * p->in_w;
  for (c = 0; c < cin; c++) {
    const int8_t *xr = x + c * hw + iy0 * p->in_w + ix0;
    for (ky = 0; ky < p->k_h; ky++, xr += p->dil_h * p->in_w, w += p->k_w)
      for (kx = 0; kx < p->k_w; kx++) acc += xr[kx * p->dil_w] * w[kx];
  }
  return acc;
}

void offramp_conv(const offramp_conv_t *p, const int8_t *x, int8_t *y) {
  const int32_t cin = p->in_c / p->groups, cout = p->out_c / p->groups;
  const int32_t span_h = (p->k_h - 1) * p->dil_h, span_w = (p->k_w - 1) * p->dil_w;
  const int32_t wsize = cin * p->k_h * p->k_w;
  int32_t o, oy, ox;
  for (o = 0; o < p->out_c; o++) {
    const int8_t *xg = x + (o / cout) * cin * p->in_h * p->in_w;
    const int8_t *w = p->weight + o * wsize;
    const int32_t bias = p->bias[o];
    const offramp_mul_t m = p->mul[o];
    for (oy = 0; oy < p->out_h; oy++) {
      const int32_t iy0 = oy * p->stride_h - p->pad_top;
      const int rows_inside = iy0 >= 0 && iy0 + span_h < p->in_h;
      for (ox = 0; ox < p->out_w; ox++) {
        const int32_t ix0 = ox * p->stride_w - p->pad_left;
        const int32_t acc = rows_inside && ix0 >= 0 && ix0 + span_w < p->in_w
          ? window_sum_inside(p, xg, w, cin, iy0, ix0) : window_sum(p, xg, w, cin, iy0, ix0);
        *y++ = offramp_to_int8(bias + acc, m, p->out_zero, p->lo, p->hi);
      }
    }
  }
}

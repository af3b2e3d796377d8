/* offramp_misc.c: rescaling and input quantization, portable C. The TypeScript reference is lib/kernels/misc.ts. */
#include "offramp_kernels.h"

void offramp_rescale(const offramp_rescale_t *p, const int8_t *x, int8_t *y) {
  int32_t i;
  for (i = 0; i < p->n; i++) y[i] = offramp_to_int8(x[i] - p->in_zero, &p->mul, p->out_zero, p->lo, p->hi);
}

/* Ties to even without libm: the quotient is clamped first, so the conversion to int32 is defined. */
int8_t offramp_quantize_value(float x, float scale, int32_t zero) {
  float v = x / scale, f;
  int32_t t, r;
  if (v > 1000.0f) v = 1000.0f;
  if (v < -1000.0f) v = -1000.0f;
  if (v != v) v = 0.0f;
  t = (int32_t)v;                 /* truncates toward zero */
  f = v - (float)t;               /* exact: |v| < 2^23 */
  r = t;
  if (f > 0.5f || (f == 0.5f && (t & 1))) r = t + 1;
  else if (f < -0.5f || (f == -0.5f && (t & 1))) r = t - 1;
  r += zero;
  return (int8_t)(r < -128 ? -128 : r > 127 ? 127 : r);
}

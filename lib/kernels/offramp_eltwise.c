/* offramp_eltwise.c: int8 Add, Mul and table lookups, portable C. The TypeScript reference is
 * lib/kernels/eltwise.ts. b's broadcast pattern is walked with a counter (no division per value);
 * parameters are held in locals (a store through int8_t may alias them). */
#include "offramp_kernels.h"

/* round(acc / 2^e), ties to even, plus the zero point, clamped: floor((acc + 2^(e-1) - 1 + b) / 2^e), b the
 * floor quotient's lowest bit (offramp_requant.h). |acc| < 2^30 (multipliers below 2^21, |x - zero| <= 255),
 * so the nudged sum stays below 2^31: all in 32 bits. */
static inline int8_t add_out(int32_t acc, int32_t e, int32_t nudge, int32_t zero, int32_t lo, int32_t hi) {
  int32_t v = ((acc + nudge + ((acc >> e) & 1)) >> e) + zero;
  if (v < lo) v = lo;
  if (v > hi) v = hi;
  return (int8_t)v;
}

void offramp_add(const offramp_add_t *p, const int8_t *a, const int8_t *b, int8_t *y) {
  const int32_t n = p->n, inner = p->inner, b_n = p->b_n, a_zero = p->a_zero, b_zero = p->b_zero;
  const int32_t ma = p->mult_a, mb = p->mult_b, zero = p->out_zero, lo = p->lo, hi = p->hi;
  const int32_t e = p->shift, nudge = (INT32_C(1) << (e - 1)) - 1;
  int32_t i = 0, j = 0, k;
  if (b_n == n) {
    /* the same shape: the residual Add */
    for (; i < n; i++) y[i] = add_out((a[i] - a_zero) * ma + (b[i] - b_zero) * mb, e, nudge, zero, lo, hi);
    return;
  }
  if (inner == 1) {
    /* b along the last axes: one b value a value */
    for (; i < n; i++) {
      y[i] = add_out((a[i] - a_zero) * ma + (b[j] - b_zero) * mb, e, nudge, zero, lo, hi);
      if (++j == b_n) j = 0;
    }
    return;
  }
  while (i < n) {
    const int32_t tb = (b[j] - b_zero) * mb;
    for (k = 0; k < inner; k++, i++) y[i] = add_out((a[i] - a_zero) * ma + tb, e, nudge, zero, lo, hi);
    if (++j == b_n) j = 0;
  }
}

void offramp_mul(const offramp_mul2_t *p, const int8_t *a, const int8_t *b, int8_t *y) {
  const int32_t n = p->n, inner = p->inner, b_n = p->b_n, a_zero = p->a_zero, b_zero = p->b_zero;
  const int32_t zero = p->out_zero, lo = p->lo, hi = p->hi;
  const offramp_mul_t m = p->mul;
  int32_t i = 0, j = 0, k;
  if (b_n == n) {
    for (; i < n; i++) y[i] = offramp_to_int8((a[i] - a_zero) * (b[i] - b_zero), &m, zero, lo, hi);
    return;
  }
  if (inner == 1) {
    for (; i < n; i++) {
      y[i] = offramp_to_int8((a[i] - a_zero) * (b[j] - b_zero), &m, zero, lo, hi);
      if (++j == b_n) j = 0;
    }
    return;
  }
  while (i < n) {
    const int32_t vb = b[j] - b_zero;
    for (k = 0; k < inner; k++, i++) y[i] = offramp_to_int8((a[i] - a_zero) * vb, &m, zero, lo, hi);
    if (++j == b_n) j = 0;
  }
}

void offramp_lut(const offramp_lut_t *p, const int8_t *x, int8_t *y) {
  const int32_t n = p->n;
  const int8_t *table = p->table + 128;
  int32_t i;
  for (i = 0; i < n; i++) y[i] = table[x[i]];
}

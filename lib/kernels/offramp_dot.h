/* offramp_dot.h: int8 weights dotted with int16 columns, two weight rows by two columns at a time.
 * Rows and columns hold k_row values, a multiple of 4, zero past the real ones. Columns are in their
 * natural order; weight rows are stored in dot order: within each group of four, values 0, 2, 1, 3
 * (the tables are written so), so that SXTB16 of a weight word gives values 0 and 1 as two halfwords
 * and SXTB16 of the word shifted right by 8 gives values 2 and 3, each pairing with one 32-bit load
 * of the column for SMLAD, which multiplies and adds both pairs at once (Arm architecture reference
 * manual, Armv7-M: SXTB16, SMLAD). Without the DSP extension the same sums are formed in plain C. */
#ifndef OFFRAMP_DOT_H
#define OFFRAMP_DOT_H

#include <stdint.h>
#include <string.h>


/* The scratch columns of offramp_conv and offramp_dense: two of the largest k_row of the model, word
 * aligned (the generated tables define it). */
extern int16_t *const offramp_conv_scratch;

#if defined(__ARM_FEATURE_SIMD32) && __ARM_FEATURE_SIMD32
#include <arm_acle.h>
#define OFFRAMP_DOT_DSP 1

static inline uint32_t offramp_load32(const void *p) { uint32_t v; memcpy(&v, p, 4); return v; }

/* acc = { a.p, b.p, a.q, b.q }; b = a + n and q = p + n, as offramp_conv lays rows and columns out
 * (one base pointer each, so the four accumulators, two weight words and their halves fit in the
 * core's registers). */
static inline void offramp_dot_2x2(const int8_t *a, const int8_t *b, const int16_t *p, const int16_t *q, int32_t n, int32_t acc[4]) {
  int32_t ap = 0, bp = 0, aq = 0, bq = 0;
  const int8_t *end = a + n;
  const int32_t wb = (int32_t)(b - a), cq = (int32_t)(q - p);
  while (a < end) {
    const uint32_t wa0 = offramp_load32(a), wb0 = offramp_load32(a + wb);
    const int32_t p02 = (int32_t)offramp_load32(p), p13 = (int32_t)offramp_load32(p + 2);
    const int32_t q02 = (int32_t)offramp_load32(p + cq), q13 = (int32_t)offramp_load32(p + cq + 2);
    int32_t w01 = __sxtb16((int32_t)wa0), w23 = __sxtb16((int32_t)(wa0 >> 8));
    ap = __smlad(w01, p02, ap); ap = __smlad(w23, p13, ap);
    aq = __smlad(w01, q02, aq); aq = __smlad(w23, q13, aq);
    w01 = __sxtb16((int32_t)wb0); w23 = __sxtb16((int32_t)(wb0 >> 8));
    bp = __smlad(w01, p02, bp); bp = __smlad(w23, p13, bp);
    bq = __smlad(w01, q02, bq); bq = __smlad(w23, q13, bq);
    a += 4; p += 4;
  }
  acc[0] = ap; acc[1] = bp; acc[2] = aq; acc[3] = bq;
}

/* acc = { a.p, b.p } */
static inline void offramp_dot_2x1(const int8_t *a, const int8_t *b, const int16_t *p, int32_t n, int32_t acc[2]) {
  int32_t ap = 0, bp = 0, k;
  for (k = 0; k < n; k += 4) {
    const uint32_t wa = offramp_load32(a + k), wb = offramp_load32(b + k);
    const int32_t p02 = (int32_t)offramp_load32(p + k), p13 = (int32_t)offramp_load32(p + k + 2);
    ap = __smlad(__sxtb16((int32_t)wa), p02, ap); ap = __smlad(__sxtb16((int32_t)(wa >> 8)), p13, ap);
    bp = __smlad(__sxtb16((int32_t)wb), p02, bp); bp = __smlad(__sxtb16((int32_t)(wb >> 8)), p13, bp);
  }
  acc[0] = ap; acc[1] = bp;
}
#else
#define OFFRAMP_DOT_DSP 0

static inline void offramp_dot_2x2(const int8_t *a, const int8_t *b, const int16_t *p, const int16_t *q, int32_t n, int32_t acc[4]) {
  int32_t ap = 0, bp = 0, aq = 0, bq = 0, k;
  for (k = 0; k < n; k += 4) {
    /* weights in dot order (0, 2, 1, 3), columns in natural order */
    ap += a[k] * p[k] + a[k + 2] * p[k + 1] + a[k + 1] * p[k + 2] + a[k + 3] * p[k + 3];
    bp += b[k] * p[k] + b[k + 2] * p[k + 1] + b[k + 1] * p[k + 2] + b[k + 3] * p[k + 3];
    aq += a[k] * q[k] + a[k + 2] * q[k + 1] + a[k + 1] * q[k + 2] + a[k + 3] * q[k + 3];
    bq += b[k] * q[k] + b[k + 2] * q[k + 1] + b[k + 1] * q[k + 2] + b[k + 3] * q[k + 3];
  }
  acc[0] = ap; acc[1] = bp; acc[2] = aq; acc[3] = bq;
}

static inline void offramp_dot_2x1(const int8_t *a, const int8_t *b, const int16_t *p, int32_t n, int32_t acc[2]) {
  int32_t ap = 0, bp = 0, k;
  for (k = 0; k < n; k += 4) {
    ap += a[k] * p[k] + a[k + 2] * p[k + 1] + a[k + 1] * p[k + 2] + a[k + 3] * p[k + 3];
    bp += b[k] * p[k] + b[k + 2] * p[k + 1] + b[k + 1] * p[k + 2] + b[k + 3] * p[k + 3];
  }
  acc[0] = ap; acc[1] = bp;
}
#endif

#endif

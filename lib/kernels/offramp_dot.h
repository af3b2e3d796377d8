/* offramp_dot.h: int8 weights dotted with int16 columns, two weight rows by two columns at a time.
 * Rows and columns hold k_row values, a multiple of 4, zero past the real ones. Weight rows are stored
 * in dot order: within each group of four, values 0, 2, 1, 3 (the tables are written so), so that
 * SXTB16 of a weight word gives values 0 and 1 as two halfwords and SXTB16 of the word rotated by 8
 * gives values 2 and 3, each pairing with one 32-bit load of the column for SMLAD, which multiplies
 * and adds both pairs at once (Arm architecture reference manual, Armv7-M: SXTB16, SMLAD). The two
 * columns of offramp_dot_2x2 are interleaved by groups of four (four values of column p, then the same
 * four of column q, …: OFFRAMP_PAIR_AT), so one pointer walks both and the loop stays in registers.
 * Without the DSP extension the same sums are formed in plain C. */
#ifndef OFFRAMP_DOT_H
#define OFFRAMP_DOT_H

#include <stdint.h>
#include <string.h>

/* Where value j of column `slot` (0: p, 1: q) of an interleaved pair sits. */
#define OFFRAMP_PAIR_AT(j, slot) ((((j) >> 2) << 3) + ((slot) << 2) + ((j) & 3))


/* The scratch columns of offramp_conv and offramp_dense: two of the largest k_row of the model, word
 * aligned (the generated tables define it). */
extern int16_t *const offramp_conv_scratch;

#if defined(__ARM_FEATURE_SIMD32) && __ARM_FEATURE_SIMD32
#include <arm_acle.h>
#define OFFRAMP_DOT_DSP 1

static inline uint32_t offramp_load32(const void *p) { uint32_t v; memcpy(&v, p, 4); return v; }

/* SXTB16 of the word rotated right by 8 (values 2 and 3 of a dot-order group). The rotation is part of
 * the instruction; gcc 12 emits a separate shift for the intrinsic form, so it is written out. */
static inline int32_t offramp_sxtb16_ror8(uint32_t w) {
#if defined(__GNUC__)
  int32_t r;
  __asm__("sxtb16 %0, %1, ror #8" : "=r"(r) : "r"(w));
  return r;
#else
  return __sxtb16((int32_t)(w >> 8));
#endif
}

/* acc = { a.p, b.p, a.q, b.q }; pq holds columns p and q interleaved (OFFRAMP_PAIR_AT). With one base
 * pointer for the rows (b at a fixed distance) and one for the columns, the four accumulators, the two
 * weight words, their halves and a column word fit in the core's registers: 22 instructions per
 * 16 multiply-accumulates on Cortex-M4 with gcc -O2. */
static inline void offramp_dot_2x2(const int8_t *a, const int8_t *b, const int16_t *pq, int32_t n, int32_t acc[4]) {
  int32_t ap = 0, bp = 0, aq = 0, bq = 0;
  const int8_t *end = a + n;
  const int32_t wb = (int32_t)(b - a);
  while (a < end) {
    const uint32_t wa0 = offramp_load32(a), wb0 = offramp_load32(a + wb);
    int32_t x = __sxtb16((int32_t)wa0), y = __sxtb16((int32_t)wb0), c;
    c = (int32_t)offramp_load32(pq);
    ap = __smlad(x, c, ap); bp = __smlad(y, c, bp);
    c = (int32_t)offramp_load32(pq + 4);
    aq = __smlad(x, c, aq); bq = __smlad(y, c, bq);
    x = offramp_sxtb16_ror8(wa0); y = offramp_sxtb16_ror8(wb0);
    c = (int32_t)offramp_load32(pq + 2);
    ap = __smlad(x, c, ap); bp = __smlad(y, c, bp);
    c = (int32_t)offramp_load32(pq + 6);
    aq = __smlad(x, c, aq); bq = __smlad(y, c, bq);
    a += 4; pq += 8;
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

static inline void offramp_dot_2x2(const int8_t *a, const int8_t *b, const int16_t *pq, int32_t n, int32_t acc[4]) {
  int32_t ap = 0, bp = 0, aq = 0, bq = 0, k;
  for (k = 0; k < n; k += 4, pq += 8) {
    /* weights in dot order (0, 2, 1, 3); columns p at pq[0..3], q at pq[4..7] */
    ap += a[k] * pq[0] + a[k + 2] * pq[1] + a[k + 1] * pq[2] + a[k + 3] * pq[3];
    bp += b[k] * pq[0] + b[k + 2] * pq[1] + b[k + 1] * pq[2] + b[k + 3] * pq[3];
    aq += a[k] * pq[4] + a[k + 2] * pq[5] + a[k + 1] * pq[6] + a[k + 3] * pq[7];
    bq += b[k] * pq[4] + b[k + 2] * pq[5] + b[k + 1] * pq[6] + b[k + 3] * pq[7];
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

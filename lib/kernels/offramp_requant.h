/* offramp_requant.h: requantization by a fixed-point multiplier and shift (Jacob et al. 2018,
 * "Quantization and Training of Neural Networks for Efficient Integer-Arithmetic-Only Inference",
 * section 2.2). The C twin of lib/kernels/requant.ts, operation for operation.
 *
 * An int32 accumulator times a real multiplier M = mult * 2^(-31 - shift), mult a Q31 value in
 * [2^30, 2^31): the 64-bit product shifted right with one rounding, to nearest with ties to even (as
 * ONNX QuantizeLinear rounds). Relies on two's complement and an arithmetic right shift of negative
 * values (implementation-defined in C99; what gcc and every Cortex-M compiler do), checked below. */
#ifndef OFFRAMP_REQUANT_H
#define OFFRAMP_REQUANT_H

#include <stdint.h>

#if (-1 >> 1) != -1
#error "offramp needs an arithmetic right shift of negative integers"
#endif

typedef struct {
  int32_t mult;        /* Q31, 0 for a multiplier that rounds every accumulator to 0 */
  int32_t shift;       /* M = mult * 2^(-31 - shift); -15 ... 31 */
  uint32_t nudge_lo;   /* for shift >= 1: 2^(30 + shift) - 1, the rounding's addend, as two words */
  uint32_t nudge_hi;   /* (the tables hold it, so no output pays for the 64-bit shift that makes it) */
} offramp_mul_t;

/* round(acc * mult / 2^(31 + shift)) with ties to even, saturated to int32: the exact product, rounded
 * once. shift is -15 ... 31, so the right shift e is 16 ... 62 bits of a 64-bit product. With the floor
 * quotient's lowest bit b, floor((p + 2^(e-1) - 1 + b) / 2^e) rounds to nearest and a tie to the even
 * neighbour (below half: the sum stays under the next multiple; above: it reaches it; at half: it
 * reaches it exactly when b is 1). */
/* The same for a multiplier with shift >= 1, the common case (callers that know it skip the test).
 * e = 32 + s: the quotient is the high word of p + nudge, shifted by s; it fits int32 as it is (a
 * 32-bit add pair and shift, where the general form needs 64-bit shifts by a variable). */
static inline int32_t offramp_requantize_s1(int32_t acc, const offramp_mul_t *m) {
  const int32_t s = m->shift - 1;
  const int64_t prod = (int64_t)acc * (int64_t)m->mult;
  const uint32_t b = (uint32_t)(((int32_t)(prod >> 32) >> s) & 1);
  const uint64_t u = (uint64_t)prod + ((uint64_t)m->nudge_hi << 32 | m->nudge_lo) + b;
  return (int32_t)(uint32_t)(u >> 32) >> s;
}

static inline int32_t offramp_requantize(int32_t acc, const offramp_mul_t *mp) {
  /* by pointer: passed by value, the struct is copied to the stack at every output (gcc -O2) */
  int64_t p, q;
  int32_t e;
  if (mp->shift >= 1) return offramp_requantize_s1(acc, mp);
  if (mp->mult == 0) return 0;
  e = 31 + mp->shift;
  p = (int64_t)acc * (int64_t)mp->mult;
  q = (p + ((INT64_C(1) << (e - 1)) - 1) + ((p >> e) & 1)) >> e;
  return q > INT32_MAX ? INT32_MAX : q < INT32_MIN ? INT32_MIN : (int32_t)q;
}

/* The int8 result: the zero point added, clamped to [lo, hi] (a fused Relu or Clip narrows them). */
static inline int8_t offramp_clamp8(int32_t v, int32_t lo, int32_t hi) { return (int8_t)(v < lo ? lo : v > hi ? hi : v); }

static inline int8_t offramp_to_int8(int32_t acc, const offramp_mul_t *m, int32_t zero, int32_t lo, int32_t hi) {
  return offramp_clamp8(offramp_requantize(acc, m) + zero, lo, hi);
}

/* offramp_to_int8 for a multiplier with shift >= 1 */
static inline int8_t offramp_to_int8_s1(int32_t acc, const offramp_mul_t *m, int32_t zero, int32_t lo, int32_t hi) {
  return offramp_clamp8(offramp_requantize_s1(acc, m) + zero, lo, hi);
}

#endif

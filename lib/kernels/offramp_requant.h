/* offramp_requant.h: requantization by a fixed-point multiplier and shift (Jacob et al. 2018,
 * "Quantization and Training of Neural Networks for Efficient Integer-Arithmetic-Only Inference",
 * section 2.2). The C twin of lib/kernels/requant.ts, operation for operation.
 *
 * An int32 accumulator times a real multiplier M = mult * 2^(-31 - shift), mult a Q31 value in
 * [2^30, 2^31): a rounding doubling high multiply (ties up), then a right shift rounding to nearest
 * with ties away from zero; shift < 0 shifts left first, saturating. Relies on two's complement
 * and an arithmetic right shift of negative values (implementation-defined in C99; what gcc and
 * every Cortex-M compiler do), checked below. */
#ifndef OFFRAMP_REQUANT_H
#define OFFRAMP_REQUANT_H

#include <stdint.h>

#if (-1 >> 1) != -1
#error "offramp needs an arithmetic right shift of negative integers"
#endif

typedef struct {
  int32_t mult;   /* Q31, 0 for a multiplier that rounds every accumulator to 0 */
  int32_t shift;  /* right shift after the multiply, -31 ... 31 (negative: left shift before it) */
} offramp_mul_t;

/* The high 32 bits of 2*a*b, rounded to nearest (ties up), saturated at the one overflow. */
static inline int32_t offramp_high_mul(int32_t a, int32_t b) {
  int64_t p;
  if (a == INT32_MIN && b == INT32_MIN) return INT32_MAX;
  p = (int64_t)a * (int64_t)b + (INT64_C(1) << 30);
  return (int32_t)(p >> 31);
}

/* x / 2^e rounded to nearest, ties away from zero; e in 0 ... 31. */
static inline int32_t offramp_round_shift(int32_t x, int32_t e) {
  int32_t mask, rem, threshold;
  if (e <= 0) return x;
  mask = (int32_t)((UINT32_C(1) << e) - 1u);
  rem = x & mask;
  threshold = (mask >> 1) + (x < 0 ? 1 : 0);
  return (x >> e) + (rem > threshold ? 1 : 0);
}

/* acc * M in the int32 domain, before the output zero point. */
static inline int32_t offramp_requantize(int32_t acc, offramp_mul_t m) {
  if (m.mult == 0) return 0;
  if (m.shift < 0) {
    int64_t v = (int64_t)acc * (INT64_C(1) << -m.shift);
    int32_t s = v > INT32_MAX ? INT32_MAX : v < INT32_MIN ? INT32_MIN : (int32_t)v;
    return offramp_high_mul(s, m.mult);
  }
  return offramp_round_shift(offramp_high_mul(acc, m.mult), m.shift);
}

/* The int8 result: the zero point added, clamped to [lo, hi] (a fused Relu or Clip narrows them). */
static inline int8_t offramp_to_int8(int32_t acc, offramp_mul_t m, int32_t zero, int32_t lo, int32_t hi) {
  int32_t v = offramp_requantize(acc, m) + zero;
  return (int8_t)(v < lo ? lo : v > hi ? hi : v);
}

#endif

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
  int32_t mult;   /* Q31, 0 for a multiplier that rounds every accumulator to 0 */
  int32_t shift;  /* M = mult * 2^(-31 - shift); -15 ... 31 */
} offramp_mul_t;

/* round(acc * mult / 2^(31 + shift)) with ties to even, saturated to int32: the exact product, rounded
 * once. shift is -15 ... 31, so the right shift is 16 ... 62 bits of a 64-bit product. */
static inline int32_t offramp_requantize(int32_t acc, offramp_mul_t m) {
  int64_t p, q, r, half;
  int32_t e;
  if (m.mult == 0) return 0;
  e = 31 + m.shift;
  p = (int64_t)acc * (int64_t)m.mult;
  q = p >> e;                                  /* floor */
  r = p - q * ((int64_t)1 << e);               /* in [0, 2^e) */
  half = (int64_t)1 << (e - 1);
  if (r > half || (r == half && (q & 1))) q++;
  return q > INT32_MAX ? INT32_MAX : q < INT32_MIN ? INT32_MIN : (int32_t)q;
}

/* The int8 result: the zero point added, clamped to [lo, hi] (a fused Relu or Clip narrows them). */
static inline int8_t offramp_to_int8(int32_t acc, offramp_mul_t m, int32_t zero, int32_t lo, int32_t hi) {
  int32_t v = offramp_requantize(acc, m) + zero;
  return (int8_t)(v < lo ? lo : v > hi ? hi : v);
}

#endif

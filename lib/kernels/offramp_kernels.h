/* offramp_kernels.h: the integer kernels of offramp's int8 firmware. Tensors are int8 in the ONNX
 * layout (NCHW, batch 1, row-major); a 1-D operator is its 2-D form with a height of 1. Every
 * kernel reads its parameters from a const struct (in flash) and writes its whole output; none
 * allocates. lib/kernels/<family>.ts holds the TypeScript reference of each kernel family. */
#ifndef OFFRAMP_KERNELS_H
#define OFFRAMP_KERNELS_H

#include <stdint.h>
#include "offramp_requant.h"

/* Conv (any kernel, stride, padding, dilation, groups; depthwise is groups == in_c == out_c).
 * acc = bias[o] + sum of x * w over the window, with padded positions reading the input zero point:
 * the bias holds -in_zero * sum(w) already (folded when the tables were written), so the inner loop
 * multiplies raw int8 values. */
typedef struct {
  int32_t in_c, in_h, in_w, out_c, out_h, out_w;
  int32_t k_h, k_w, stride_h, stride_w, dil_h, dil_w, pad_top, pad_left;
  int32_t groups;
  int32_t in_zero, out_zero, lo, hi;
  int32_t k_row;               /* weights per output channel, (in_c / groups) * k_h * k_w rounded up to a multiple of 4 */
  const int8_t *weight;        /* [out_c][k_row]: [in_c / groups][k_h][k_w], then zeros */
  const int32_t *bias;         /* [out_c], input zero point folded in */
  const offramp_mul_t *mul;    /* [out_c]: in_scale * w_scale[o] / out_scale */
} offramp_conv_t;
void offramp_conv(const offramp_conv_t *p, const int8_t *x, int8_t *y);

/* Gemm / MatMul on one row: y[o] = requant(bias[o] + sum_i x[i] * w[o][i]). */
typedef struct {
  int32_t in, out;
  int32_t in_zero, out_zero, lo, hi;
  int32_t k_row;               /* in, rounded up to a multiple of 4 */
  const int8_t *weight;        /* [out][k_row]: in values, then zeros */
  const int32_t *bias;         /* [out], input zero point folded in */
  const offramp_mul_t *mul;    /* [out] */
} offramp_dense_t;
void offramp_dense(const offramp_dense_t *p, const int8_t *x, int8_t *y);

/* MaxPool and AveragePool (GlobalAveragePool, ReduceMean over the spatial axes and the heads' grid
 * pooling are AveragePool with the whole map, or a grid, as the window). Windows may run past the
 * input (padding, ceil_mode): MaxPool skips those positions; AveragePool counts them only with
 * include_pad. AveragePool requantizes the window's sum of (x - in_zero) by mul[count], count being
 * the number of positions averaged (1 ... k_h * k_w). MaxPool keeps the input's parameters. */
typedef struct {
  int32_t c, in_h, in_w, out_h, out_w;
  int32_t k_h, k_w, stride_h, stride_w, dil_h, dil_w, pad_top, pad_left, pad_bottom, pad_right;
  int32_t include_pad;         /* AveragePool's count_include_pad: taps in the explicit padding count */
  int32_t in_zero, out_zero, lo, hi;
  const offramp_mul_t *mul;    /* AveragePool: [k_h * k_w + 1], by count; MaxPool: unused */
} offramp_pool_t;
void offramp_maxpool(const offramp_pool_t *p, const int8_t *x, int8_t *y);
void offramp_avgpool(const offramp_pool_t *p, const int8_t *x, int8_t *y);

/* y = requant(x - in_zero): a value whose int8 parameters change (Reshape-like ops keep the bytes). */
typedef struct {
  int32_t n;
  int32_t in_zero, out_zero, lo, hi;
  offramp_mul_t mul;           /* in_scale / out_scale */
} offramp_rescale_t;
void offramp_rescale(const offramp_rescale_t *p, const int8_t *x, int8_t *y);

/* QuantizeLinear of float32 input: round(x / scale) to even, plus the zero point, saturated. */
int8_t offramp_quantize_value(float x, float scale, int32_t zero);

/* Add and Mul of two int8 tensors. a has all n values; b is broadcast: each of its b_n values serves
 * `inner` consecutive values of a, and the pattern repeats (b_n == n, inner == 1: the same shape;
 * b_n == 1, inner == n: a scalar; b_n == C, inner == H * W: one value per channel). */
typedef struct {
  int32_t n, inner, b_n;
  int32_t a_zero, b_zero, out_zero, lo, hi;
  int32_t mult_a, mult_b;      /* s_a / s_y and s_b / s_y as round(r * 2^shift), both below 2^21 */
  int32_t shift;               /* 1 ... 31 */
} offramp_add_t;
/* y = round(((a - a_zero) * mult_a + (b - b_zero) * mult_b) / 2^shift) + out_zero, ties to even: the exact
 * sum (below 2^30) rounded once, clamped to [lo, hi] (a fused Relu narrows them). */
void offramp_add(const offramp_add_t *p, const int8_t *a, const int8_t *b, int8_t *y);

typedef struct {
  int32_t n, inner, b_n;
  int32_t a_zero, b_zero, out_zero, lo, hi;
  offramp_mul_t mul;           /* s_a * s_b / s_y */
} offramp_mul2_t;
/* y = requant((a - a_zero) * (b - b_zero)). */
void offramp_mul(const offramp_mul2_t *p, const int8_t *a, const int8_t *b, int8_t *y);

/* An elementwise function of one int8 value (Sigmoid, HardSigmoid, HardSwish, Tanh, LeakyRelu): the
 * table, computed when the tables were written, holds y for each x, clamp included. */
typedef struct {
  int32_t n;
  const int8_t *table;         /* [256]: y for x = -128 ... 127 */
} offramp_lut_t;
void offramp_lut(const offramp_lut_t *p, const int8_t *x, int8_t *y);

/* Concat: `outer` times, each part's next `block` values in turn, requantized to the output's
 * parameters (copied as they are where the part's parameters are the output's). */
typedef struct {
  const int8_t *x;             /* the part's tensor */
  int32_t block, in_zero;
  offramp_mul_t mul;           /* s_x / s_y */
  int32_t copy;                /* 1: same parameters, no clamp: bytes copied */
} offramp_concat_part_t;
typedef struct {
  int32_t count, outer;
  int32_t out_zero, lo, hi;
  const offramp_concat_part_t *parts;   /* [count] */
} offramp_concat_t;
void offramp_concat(const offramp_concat_t *p, int8_t *y);

/* Transpose: y in output order; for each output axis its size and the input's stride along it. */
#define OFFRAMP_MAX_RANK 6
typedef struct {
  int32_t n, rank;
  int32_t dims[OFFRAMP_MAX_RANK];
  int32_t strides[OFFRAMP_MAX_RANK];
} offramp_transpose_t;
void offramp_transpose(const offramp_transpose_t *p, const int8_t *x, int8_t *y);

/* One part of a Split: `outer` times, `block` values from `start` within each input row of `in_row`,
 * requantized to the part's parameters (copied where they are the input's). */
typedef struct {
  int32_t outer, in_row, start, block;
  int32_t in_zero, out_zero, lo, hi;
  offramp_mul_t mul;           /* s_x / s_y */
  int32_t copy;                /* 1: same parameters, no clamp: bytes copied */
} offramp_slice_t;
void offramp_slice(const offramp_slice_t *p, const int8_t *x, int8_t *y);

#endif

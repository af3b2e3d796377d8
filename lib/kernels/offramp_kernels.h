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

#endif

/* offramp_dense.c: int8 Gemm / MatMul on one row. The TypeScript reference is lib/kernels/dense.ts.
 * The input row goes once into an int16 column; two output rows at a time are dotted
 * with it (SMLAD where the core has the DSP extension, plain C elsewhere; the same exact sums). */
#include "offramp_kernels.h"
#include "offramp_dot.h"

void offramp_dense(const offramp_dense_t *p, const int8_t *x, int8_t *y) {
  int16_t *col = offramp_conv_scratch;
  int32_t i, o;
  for (i = 0; i < p->in; i++) col[i] = x[i];
  for (; i < p->k_row; i++) col[i] = 0;
  for (o = 0; o < p->out; o += 2) {
    const int pair = o + 1 < p->out;
    const int8_t *wa = p->weight + o * p->k_row;
    int32_t acc[2];
    offramp_dot_2x1(wa, pair ? wa + p->k_row : wa, col, p->k_row, acc);
    y[o] = offramp_to_int8(p->bias[o] + acc[0], &p->mul[o], p->out_zero, p->lo, p->hi);
    if (pair) y[o + 1] = offramp_to_int8(p->bias[o + 1] + acc[1], &p->mul[o + 1], p->out_zero, p->lo, p->hi);
  }
}

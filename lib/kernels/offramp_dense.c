/* offramp_dense.c: int8 Gemm / MatMul on one row, portable C. The TypeScript reference is lib/kernels/dense.ts. */
#include "offramp_kernels.h"

void offramp_dense(const offramp_dense_t *p, const int8_t *x, int8_t *y) {
  int32_t o, i;
  const int8_t *w = p->weight;
  for (o = 0; o < p->out; o++, w += p->in) {
    int32_t acc = p->bias[o];
    for (i = 0; i < p->in; i++) acc += x[i] * w[i];
    y[o] = offramp_to_int8(acc, p->mul[o], p->out_zero, p->lo, p->hi);
  }
}

/* offramp_layout.c: int8 Concat, Transpose and the parts of a Split, portable C. The TypeScript reference is lib/kernels/layout.ts. */
#include "offramp_kernels.h"

void offramp_concat(const offramp_concat_t *p, int8_t *y) {
  const int32_t count = p->count, outer = p->outer, zero = p->out_zero, lo = p->lo, hi = p->hi;
  const offramp_concat_part_t *parts = p->parts;
  int32_t o, k, i;
  for (o = 0; o < outer; o++)
    for (k = 0; k < count; k++) {
      const int32_t block = parts[k].block, in_zero = parts[k].in_zero;
      const offramp_mul_t m = parts[k].mul;
      const int8_t *x = parts[k].x + o * block;
      if (parts[k].copy) for (i = 0; i < block; i++) *y++ = x[i];
      else for (i = 0; i < block; i++) *y++ = offramp_to_int8(x[i] - in_zero, &m, zero, lo, hi);
    }
}

/* The output in order; an index counter per output axis carries like an odometer, the input offset
 * moving by that axis's stride (and back by its whole span on a carry). */
void offramp_transpose(const offramp_transpose_t *p, const int8_t *x, int8_t *y) {
  int32_t dims[OFFRAMP_MAX_RANK], strides[OFFRAMP_MAX_RANK], idx[OFFRAMP_MAX_RANK];
  const int32_t n = p->n, rank = p->rank, last = rank - 1;
  int32_t i, d, off = 0;
  for (d = 0; d < rank; d++) { dims[d] = p->dims[d]; strides[d] = p->strides[d]; idx[d] = 0; }
  if (rank == 0) { if (n) y[0] = x[0]; return; }
  for (i = 0; i < n;) {
    /* the innermost axis in one run */
    const int32_t run = dims[last], step = strides[last];
    int32_t k;
    for (k = 0; k < run; k++) y[i++] = x[off + k * step];
    for (d = last - 1; d >= 0; d--) {
      off += strides[d];
      if (++idx[d] < dims[d]) break;
      off -= strides[d] * dims[d];
      idx[d] = 0;
    }
    if (d < 0) break;
  }
}

void offramp_slice(const offramp_slice_t *p, const int8_t *x, int8_t *y) {
  const int32_t outer = p->outer, in_row = p->in_row, block = p->block, in_zero = p->in_zero;
  const int32_t zero = p->out_zero, lo = p->lo, hi = p->hi, copy = p->copy;
  const offramp_mul_t m = p->mul;
  int32_t o, i;
  x += p->start;
  for (o = 0; o < outer; o++, x += in_row) {
    if (copy) for (i = 0; i < block; i++) *y++ = x[i];
    else for (i = 0; i < block; i++) *y++ = offramp_to_int8(x[i] - in_zero, &m, zero, lo, hi);
  }
}

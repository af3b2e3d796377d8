/* offramp_conv.c: int8 convolution. The TypeScript reference is lib/kernels/conv.ts.
 *
 * Two output positions at a time, their windows gathered into a pair of interleaved int16 columns
 * (offramp_dot.h; a padded tap holds the input zero point, which the folded bias cancels), then two output channels at a time dotted with
 * both columns: four accumulators share every load. On cores with the DSP extension (Armv7E-M,
 * Armv8-M Mainline with DSP, Armv8.1-M) the dot product runs two multiply-accumulates per SMLAD
 * instruction; elsewhere (Cortex-M0+, the host) the same sums in plain C. Either way the sums are
 * exact, so every path gives the same bytes. Parameters are copied into locals first: a store
 * through an int8_t pointer may alias anything, and would make the compiler reload them. */
#include "offramp_kernels.h"
#include "offramp_dot.h"

typedef struct {
  int32_t in_h, in_w, hw, k_h, k_w, dil_h, dil_w, k_row;
  int16_t zero;
} window_t;

/* Values go to column `slot` of an interleaved pair (OFFRAMP_PAIR_AT): four in a row, then four skipped. */
#define PUT(v) do { *col++ = (int16_t)(v); if (--left == 0) { left = 4; col += 4; } } while (0)

/* The window at (iy0, ix0) over cin channels, as int16 into column `slot` of pq, zeros past the real taps. */
static void gather(const window_t *w, const int8_t *x, int32_t cin, int32_t iy0, int32_t ix0, int16_t *pq, int32_t slot) {
  const int32_t in_h = w->in_h, in_w = w->in_w, hw = w->hw, k_h = w->k_h, k_w = w->k_w, dil_h = w->dil_h, dil_w = w->dil_w;
  const int16_t zero = w->zero;
  int16_t *col = pq + 4 * slot;
  int32_t c, ky, kx, left = 4, pad = w->k_row - cin * k_h * k_w;
  if (iy0 >= 0 && iy0 + (k_h - 1) * dil_h < in_h && ix0 >= 0 && ix0 + (k_w - 1) * dil_w < in_w) {
    for (c = 0; c < cin; c++) {
      const int8_t *row = x + c * hw + iy0 * in_w + ix0;
      if (k_w == 3 && dil_w == 1) {
        /* the common 3-wide window, unrolled */
        for (ky = 0; ky < k_h; ky++, row += dil_h * in_w) { PUT(row[0]); PUT(row[1]); PUT(row[2]); }
      } else {
        for (ky = 0; ky < k_h; ky++, row += dil_h * in_w) {
          if (dil_w == 1) for (kx = 0; kx < k_w; kx++) PUT(row[kx]);
          else for (kx = 0; kx < k_w; kx++) PUT(row[kx * dil_w]);
        }
      }
    }
  } else {
    for (c = 0; c < cin; c++) {
      const int8_t *xc = x + c * hw;
      for (ky = 0; ky < k_h; ky++) {
        const int32_t iy = iy0 + ky * dil_h;
        const int row_in = iy >= 0 && iy < in_h;
        for (kx = 0; kx < k_w; kx++) {
          const int32_t ix = ix0 + kx * dil_w;
          PUT(row_in && ix >= 0 && ix < in_w ? xc[iy * in_w + ix] : zero);
        }
      }
    }
  }
  while (pad-- > 0) PUT(0);
}
#undef PUT

/* The group's output channels, two at a time, dotted with the column pair; REQ requantizes. */
#define CHANNELS(REQ) \
  for (o = g * cout; o < o_end; o += 2) { \
    const int pair = o + 1 < o_end; \
    const int8_t *wa = weight + o * k_row; \
    int8_t *ya = y + o * positions + pos; \
    int32_t acc[4]; \
    offramp_dot_2x2(wa, pair ? wa + k_row : wa, pq, k_row, acc); \
    ya[0] = REQ(bias[o] + acc[0], &mul[o], zero, lo, hi); \
    if (two) ya[1] = REQ(bias[o] + acc[2], &mul[o], zero, lo, hi); \
    if (pair) { \
      ya[positions] = REQ(bias[o + 1] + acc[1], &mul[o + 1], zero, lo, hi); \
      if (two) ya[positions + 1] = REQ(bias[o + 1] + acc[3], &mul[o + 1], zero, lo, hi); \
    } \
  }

void offramp_conv(const offramp_conv_t *p, const int8_t *x, int8_t *y) {
  const int32_t groups = p->groups, cin = p->in_c / groups, cout = p->out_c / groups;
  const int32_t out_w = p->out_w, positions = p->out_h * out_w, k_row = p->k_row;
  const int32_t stride_h = p->stride_h, stride_w = p->stride_w, pad_top = p->pad_top, pad_left = p->pad_left;
  const int32_t zero = p->out_zero, lo = p->lo, hi = p->hi;
  const int8_t *weight = p->weight;
  const int32_t *bias = p->bias;
  const offramp_mul_t *mul = p->mul;
  int16_t *pq = offramp_conv_scratch;
  window_t w;
  int32_t g, pos, o;
  w.in_h = p->in_h; w.in_w = p->in_w; w.hw = p->in_h * p->in_w; w.k_h = p->k_h; w.k_w = p->k_w;
  w.dil_h = p->dil_h; w.dil_w = p->dil_w; w.k_row = k_row; w.zero = (int16_t)p->in_zero;
  for (g = 0; g < groups; g++) {
    const int8_t *xg = x + g * cin * w.hw;
    const int32_t o_end = (g + 1) * cout;
    /* every multiplier of the group with shift >= 1 (the common case): the requantization without its test */
    int s1 = 1;
    for (o = g * cout; o < o_end; o++) if (mul[o].shift < 1) s1 = 0;
    for (pos = 0; pos < positions; pos += 2) {
      const int two = pos + 1 < positions;
      const int32_t next = two ? pos + 1 : pos; /* a last single position fills both columns */
      gather(&w, xg, cin, (pos / out_w) * stride_h - pad_top, (pos % out_w) * stride_w - pad_left, pq, 0);
      gather(&w, xg, cin, (next / out_w) * stride_h - pad_top, (next % out_w) * stride_w - pad_left, pq, 1);
      if (s1) { CHANNELS(offramp_to_int8_s1) } else { CHANNELS(offramp_to_int8) }
    }
  }
}

/* A plain C int8 3x3 convolution, the baseline for instructions per MAC on the emulated cores:
 * NHWC, valid padding, stride 1, int32 accumulation from a bias, per-tensor requantization by a
 * fixed-point multiplier and shift with round-to-nearest, clamped to int8 (common practice for
 * integer-only inference). No hand blocking, no SIMD intrinsics: what gcc -O2 makes of the loop. */
#include <stdint.h>

#ifdef OFFRAMP_TRACE
void offramp_trace(int32_t event, int32_t index);
#define MARK(event, index) offramp_trace(event, index)
#else
#define MARK(event, index) ((void)0)
#endif

void bench_conv3x3(const int8_t *in, int h, int w, int cin, const int8_t *kernel, const int32_t *bias, int cout,
                   int32_t multiplier, int shift, int8_t *out) {
  MARK(1, 0);
  const int oh = h - 2, ow = w - 2;
  for (int y = 0; y < oh; y++) {
    for (int x = 0; x < ow; x++) {
      for (int co = 0; co < cout; co++) {
        int32_t acc = bias[co];
        const int8_t *k = kernel + co * 9 * cin;
        for (int ky = 0; ky < 3; ky++) {
          const int8_t *row = in + ((y + ky) * w + x) * cin;
          for (int i = 0; i < 3 * cin; i++) acc += (int32_t)row[i] * (int32_t)k[ky * 3 * cin + i];
        }
        int64_t scaled = ((int64_t)acc * multiplier + ((int64_t)1 << (shift - 1))) >> shift;
        if (scaled > 127) scaled = 127;
        if (scaled < -128) scaled = -128;
        out[(y * ow + x) * cout + co] = (int8_t)scaled;
      }
    }
  }
  MARK(2, 0);
}

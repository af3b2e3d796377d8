/* The float32 counterpart of conv3x3.c: the same shapes and loop order, single-precision
 * multiply-accumulate from a bias (no requantization). Plain C, what gcc -O2 makes of it. */
#include <stdint.h>

#ifdef OFFRAMP_TRACE
void offramp_trace(int32_t event, int32_t index);
#define MARK(event, index) offramp_trace(event, index)
#else
#define MARK(event, index) ((void)0)
#endif

void bench_conv3x3f(const float *in, int h, int w, int cin, const float *kernel, const float *bias, int cout, float *out) {
  MARK(1, 1);
  const int oh = h - 2, ow = w - 2;
  for (int y = 0; y < oh; y++) {
    for (int x = 0; x < ow; x++) {
      for (int co = 0; co < cout; co++) {
        float acc = bias[co];
        const float *k = kernel + co * 9 * cin;
        for (int ky = 0; ky < 3; ky++) {
          const float *row = in + ((y + ky) * w + x) * cin;
          for (int i = 0; i < 3 * cin; i++) acc += row[i] * k[ky * 3 * cin + i];
        }
        out[(y * ow + x) * cout + co] = acc;
      }
    }
  }
  MARK(2, 1);
}

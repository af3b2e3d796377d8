/* Drives the benchmark convolution: pseudo-random int8 data (a fixed LCG, so every run is the same),
 * BENCH_FRAMES calls, and a checksum of the output so nothing is optimised away. */
#include <stdint.h>
#include <stdio.h>

#define H 16
#define W 16
#define CIN 8
#define COUT 16
#ifndef BENCH_FRAMES
#define BENCH_FRAMES 1
#endif

void bench_conv3x3(const int8_t *in, int h, int w, int cin, const int8_t *kernel, const int32_t *bias, int cout,
                   int32_t multiplier, int shift, int8_t *out);

static int8_t input[H * W * CIN];
static int8_t kernel[COUT * 9 * CIN];
static int32_t bias[COUT];
static int8_t output[(H - 2) * (W - 2) * COUT];

static uint32_t seed = 12345u;
static int8_t next(void) {
  seed = seed * 1664525u + 1013904223u; /* Numerical Recipes' LCG constants */
  return (int8_t)(seed >> 24);
}

int main(void) {
  for (int i = 0; i < H * W * CIN; i++) input[i] = next();
  for (int i = 0; i < COUT * 9 * CIN; i++) kernel[i] = next();
  for (int i = 0; i < COUT; i++) bias[i] = next() * 16;
  uint32_t sum = 0;
  for (int f = 0; f < BENCH_FRAMES; f++) {
    bench_conv3x3(input, H, W, CIN, kernel, bias, COUT, 1518500250, 38, output);
    for (int i = 0; i < (H - 2) * (W - 2) * COUT; i++) sum = sum * 31u + (uint8_t)output[i];
  }
  printf("checksum %08lx\n", (unsigned long)sum);
  return 0;
}

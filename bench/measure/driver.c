/* Drives the benchmark convolutions: pseudo-random data (a fixed LCG, so every run is the same),
 * BENCH_FRAMES calls of the int8 one (stage 0) and of the float32 one (stage 1), and checksums of
 * the outputs so nothing is optimised away. */
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
void bench_conv3x3f(const float *in, int h, int w, int cin, const float *kernel, const float *bias, int cout, float *out);

static int8_t input[H * W * CIN];
static int8_t kernel[COUT * 9 * CIN];
static int32_t bias[COUT];
static int8_t output[(H - 2) * (W - 2) * COUT];
static float inputf[H * W * CIN];
static float kernelf[COUT * 9 * CIN];
static float biasf[COUT];
static float outputf[(H - 2) * (W - 2) * COUT];

static uint32_t seed = 12345u;
static int8_t next(void) {
  seed = seed * 1664525u + 1013904223u; /* Numerical Recipes' LCG constants */
  return (int8_t)(seed >> 24);
}

int main(void) {
  for (int i = 0; i < H * W * CIN; i++) input[i] = next();
  for (int i = 0; i < COUT * 9 * CIN; i++) kernel[i] = next();
  for (int i = 0; i < COUT; i++) bias[i] = next() * 16;
  for (int i = 0; i < H * W * CIN; i++) inputf[i] = (float)input[i] * (1.0f / 128);
  for (int i = 0; i < COUT * 9 * CIN; i++) kernelf[i] = (float)kernel[i] * (1.0f / 128);
  for (int i = 0; i < COUT; i++) biasf[i] = (float)bias[i] * (1.0f / 16384);
  uint32_t sum = 0, sumf = 0;
  for (int f = 0; f < BENCH_FRAMES; f++) {
    bench_conv3x3(input, H, W, CIN, kernel, bias, COUT, 1518500250, 38, output);
    for (int i = 0; i < (H - 2) * (W - 2) * COUT; i++) sum = sum * 31u + (uint8_t)output[i];
    bench_conv3x3f(inputf, H, W, CIN, kernelf, biasf, COUT, outputf);
    for (int i = 0; i < (H - 2) * (W - 2) * COUT; i++) sumf = sumf * 31u + (uint32_t)(int32_t)(outputf[i] * 64.0f);
  }
  printf("checksum %08lx %08lx\n", (unsigned long)sum, (unsigned long)sumf);
  return 0;
}

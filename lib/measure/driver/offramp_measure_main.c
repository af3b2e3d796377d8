/* The measuring driver for an emit-c library: frames of OFFRAMP_INPUT_SIZE float32 values from the
 * host file named by offramp_measure_rows (semihosting; the measuring code writes both), each through offramp_classify in order (a stream, reset once),
 * then the first FULL_FRAMES again through offramp_classify_full. One line per frame on stdout:
 * "label exit reused". The library's offramp_trace calls mark the stages, decisions and frames. */
#include <stdio.h>
#include "offramp_model.h"

#ifndef FULL_FRAMES
#define FULL_FRAMES 8
#endif

extern const char offramp_measure_rows[];
static float frame[OFFRAMP_INPUT_SIZE];

int main(void) {
  FILE *f = fopen(offramp_measure_rows, "rb");
  long n = 0, i;
  if (!f) { fputs("rows: cannot open\n", stderr); return 2; }
  offramp_reset();
  while (fread(frame, sizeof frame, 1, f) == 1) {
    offramp_answer_t a = offramp_classify(frame);
    printf("%ld %ld %ld\n", (long)a.label, (long)a.exit, (long)a.reused);
    n++;
  }
  for (i = 0; i < n && i < FULL_FRAMES; i++) {
    offramp_answer_t a;
    if (fseek(f, i * (long)sizeof frame, SEEK_SET) != 0 || fread(frame, sizeof frame, 1, f) != 1) { fputs("rows: cannot read again\n", stderr); return 2; }
    a = offramp_classify_full(frame);
    printf("%ld %ld %ld\n", (long)a.label, (long)a.exit, (long)a.reused);
  }
  fclose(f);
  return 0;
}

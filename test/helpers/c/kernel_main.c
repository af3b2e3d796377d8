/* A host test driver for the kernels: for each step of stage 0, an int32 byte count and that many
 * bytes of its input on stdin; each step is run on its own and its output bytes written out. */
#include <stdio.h>
#include "offramp_net.h"

int main(void) {
  int32_t j, n;
  const offramp_stage_program_t *st = &offramp_net_stages[0];
  for (j = 0; j < st->count; j++) {
    if (fread(&n, sizeof n, 1, stdin) != 1) return 2;
    if (n > 0 && fread((int8_t *)st->steps[j].x, 1, (size_t)n, stdin) != (size_t)n) return 2;
  }
  for (j = 0; j < st->count; j++) {
    offramp_stage_program_t one;
    one.steps = &st->steps[j];
    one.count = 1;
    offramp_run_steps(&one);
    fwrite(one.steps->y, 1, (size_t)one.steps->bytes, stdout);
  }
  return 0;
}

/* A test driver for the kernels: for each step of stage 0, an int32 count of its inputs, then for
 * each input an int32 byte count and that many bytes (in the step's input order: x, x2, or a Concat's
 * parts); each step is run on its own and its output bytes written out. On the host the cases come on
 * stdin and the bytes go out raw; on an emulated core (OFFRAMP_KERNEL_CASES defined) the cases come
 * from the host file offramp_kernel_cases names (semihosting) and the bytes go out as hex. */
#include <stdio.h>
#include "offramp_net.h"

#ifdef OFFRAMP_KERNEL_CASES
extern const char offramp_kernel_cases[];
#endif

static int8_t *input_of(const offramp_step_t *s, int32_t k) {
  if (s->kind == OFFRAMP_STEP_CONCAT) return (int8_t *)((const offramp_concat_t *)s->params)->parts[k].x;
  return (int8_t *)(k == 0 ? s->x : s->x2);
}

int main(void) {
  int32_t j, k, count, n;
  const offramp_stage_program_t *st = &offramp_net_stages[0];
  FILE *in = stdin;
#ifdef OFFRAMP_KERNEL_CASES
  in = fopen(offramp_kernel_cases, "rb");
  if (!in) return 3;
#endif
  for (j = 0; j < st->count; j++) {
    if (fread(&count, sizeof count, 1, in) != 1) return 2;
    for (k = 0; k < count; k++) {
      if (fread(&n, sizeof n, 1, in) != 1) return 2;
      if (n > 0 && fread(input_of(&st->steps[j], k), 1, (size_t)n, in) != (size_t)n) return 2;
    }
  }
  for (j = 0; j < st->count; j++) {
    offramp_stage_program_t one;
    one.steps = &st->steps[j];
    one.count = 1;
    offramp_run_steps(&one);
#ifdef OFFRAMP_KERNEL_CASES
    for (n = 0; n < one.steps->bytes; n++) printf("%02x", (unsigned)(uint8_t)one.steps->y[n]);
#else
    fwrite(one.steps->y, 1, (size_t)one.steps->bytes, stdout);
#endif
  }
  return 0;
}

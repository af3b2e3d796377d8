/* A host test driver for the int8 firmware library: frames of OFFRAMP_INPUT_SIZE float32 values on
 * stdin. Mode "answers": offramp_classify on each frame, three int32 (label, exit, reused) out per
 * frame. Mode "tensors": every stage of every frame, step by step, each step's output bytes out in
 * order (the TypeScript reference writes the same stream). Mode "full": offramp_classify_full on each
 * frame, only a checksum of the labels out (for timing the whole network). */
#include <stdio.h>
#include <string.h>
#include "offramp_model.h"

static float frame[OFFRAMP_INPUT_SIZE];

int main(int argc, char **argv) {
  int tensors = argc > 1 && strcmp(argv[1], "tensors") == 0, full = argc > 1 && strcmp(argv[1], "full") == 0;
  long sum = 0;
  offramp_reset();
  while (fread(frame, sizeof frame, 1, stdin) == 1) {
    if (full) {
      sum += offramp_classify_full(frame).label;
    } else if (tensors) {
      int32_t i, k, j;
      for (i = 0; i < OFFRAMP_INPUT_SIZE; i++) offramp_input_q8[i] = offramp_quantize_value(frame[i], offramp_input_q8_params.scale, offramp_input_q8_params.zero_point);
      fwrite(offramp_input_q8, 1, OFFRAMP_INPUT_SIZE, stdout);
      for (k = 0; k < OFFRAMP_STAGES; k++)
        for (j = 0; j < offramp_net_stages[k].count; j++) {
          offramp_stage_program_t one;
          one.steps = &offramp_net_stages[k].steps[j];
          one.count = 1;
          offramp_run_steps(&one);
          fwrite(one.steps->y, 1, (size_t)one.steps->bytes, stdout);
        }
    } else {
      offramp_answer_t a = offramp_classify(frame);
      int32_t out[3];
      out[0] = a.label; out[1] = a.exit; out[2] = a.reused;
      fwrite(out, sizeof out, 1, stdout);
    }
  }
  if (full) printf("%ld\n", sum);
  return 0;
}

/* offramp_run.c: walks a stage's step table, one kernel call a step. */
#include "offramp_run.h"

void offramp_run_steps(const offramp_stage_program_t *stage) {
  int32_t i, j;
  for (i = 0; i < stage->count; i++) {
    const offramp_step_t *s = &stage->steps[i];
    switch (s->kind) {
      case OFFRAMP_STEP_CONV: offramp_conv((const offramp_conv_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_DENSE: offramp_dense((const offramp_dense_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_MAXPOOL: offramp_maxpool((const offramp_pool_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_AVGPOOL: offramp_avgpool((const offramp_pool_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_COPY: for (j = 0; j < s->bytes; j++) s->y[j] = s->x[j]; break;
      case OFFRAMP_STEP_RESCALE: offramp_rescale((const offramp_rescale_t *)s->params, s->x, s->y); break;
      default: break;
    }
  }
}

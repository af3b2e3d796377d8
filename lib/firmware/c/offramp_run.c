/* offramp_run.c: walks a stage's step table, one kernel call a step. */
#include "offramp_run.h"
#ifdef OFFRAMP_TRACE
#include "offramp_model.h"
#define TRACE(event, index) offramp_trace((event), (index))
#else
#define TRACE(event, index) ((void)0)
#endif

void offramp_run_steps(const offramp_stage_program_t *stage) {
  int32_t i, j;
  for (i = 0; i < stage->count; i++) {
    const offramp_step_t *s = &stage->steps[i];
    TRACE(OFFRAMP_TRACE_STEP_BEGIN, i);
    switch (s->kind) {
      case OFFRAMP_STEP_CONV: offramp_conv((const offramp_conv_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_DENSE: offramp_dense((const offramp_dense_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_MAXPOOL: offramp_maxpool((const offramp_pool_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_AVGPOOL: offramp_avgpool((const offramp_pool_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_COPY: for (j = 0; j < s->bytes; j++) s->y[j] = s->x[j]; break;
      case OFFRAMP_STEP_RESCALE: offramp_rescale((const offramp_rescale_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_ADD: offramp_add((const offramp_add_t *)s->params, s->x, s->x2, s->y); break;
      case OFFRAMP_STEP_MUL: offramp_mul((const offramp_mul2_t *)s->params, s->x, s->x2, s->y); break;
      case OFFRAMP_STEP_LUT: offramp_lut((const offramp_lut_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_CONCAT: offramp_concat((const offramp_concat_t *)s->params, s->y); break;
      case OFFRAMP_STEP_TRANSPOSE: offramp_transpose((const offramp_transpose_t *)s->params, s->x, s->y); break;
      case OFFRAMP_STEP_SLICE: offramp_slice((const offramp_slice_t *)s->params, s->x, s->y); break;
      default: break;
    }
    TRACE(OFFRAMP_TRACE_STEP_END, i);
  }
}

/* offramp_run.h: a stage as a table of kernel steps. The tables are generated (offramp_net.c); this
 * walker and the kernels are fixed code. */
#ifndef OFFRAMP_RUN_H
#define OFFRAMP_RUN_H

#include <stdint.h>
#include "offramp_kernels.h"

typedef enum {
  OFFRAMP_STEP_CONV = 0,     /* params: offramp_conv_t */
  OFFRAMP_STEP_DENSE = 1,    /* params: offramp_dense_t */
  OFFRAMP_STEP_MAXPOOL = 2,  /* params: offramp_pool_t */
  OFFRAMP_STEP_AVGPOOL = 3,  /* params: offramp_pool_t */
  OFFRAMP_STEP_COPY = 4,     /* no params: y is a copy of x (a reshape keeps the bytes) */
  OFFRAMP_STEP_RESCALE = 5   /* params: offramp_rescale_t */
} offramp_step_kind_t;

typedef struct {
  int32_t kind;              /* an offramp_step_kind_t */
  const void *params;
  const int8_t *x;           /* input tensor: in the arena, a handover buffer or the model input */
  int8_t *y;                 /* output tensor; never overlaps x */
  int32_t bytes;             /* bytes of y */
} offramp_step_t;

typedef struct {
  const offramp_step_t *steps;
  int32_t count;
} offramp_stage_program_t;

/* Run one stage's steps in order. */
void offramp_run_steps(const offramp_stage_program_t *stage);

#endif

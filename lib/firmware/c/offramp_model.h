/* offramp_model.h: the int8 staged network with its exits and policy, as one C99 library.
 *
 *   offramp_reset();                                  a new recording: forget the stream state
 *   offramp_answer_t a = offramp_classify(frame);     one frame, float32 in the ONNX input layout
 *   use a.label (a.exit: the exit taken, OFFRAMP_EXITS for the final output)
 *
 * No allocation, no libm, no double: every stage runs in integers on one static arena laid out by
 * offramp's arena plan; the float input is quantized with the input's scale and zero point. Not
 * reentrant: one classifier, one caller. */
#ifndef OFFRAMP_MODEL_H
#define OFFRAMP_MODEL_H

#include <stdint.h>
#include "offramp_net.h"

typedef struct {
  int32_t label;    /* the class */
  int32_t exit;     /* exit whose logits gave it: 0 ... OFFRAMP_EXITS - 1, or OFFRAMP_EXITS (final output) */
  int32_t reused;   /* stream policies: 1 when the scene's label was reused */
} offramp_answer_t;

/* A new recording: the stream policy forgets its scene (per-frame policies keep no state). */
void offramp_reset(void);

/* One frame of OFFRAMP_INPUT_SIZE float32 values in the ONNX model's input layout. */
offramp_answer_t offramp_classify(const float *input);

/* The same for a sensor that delivers int8 data already quantized with offramp_input_q8_params. */
offramp_answer_t offramp_classify_q8(const int8_t *input);

/* The whole network without the policy: every stage, the final output's label (exit OFFRAMP_EXITS).
 * The figure the exits are measured against; the stream state is left alone. */
offramp_answer_t offramp_classify_full(const float *input);

/* Exit k's int8 logits for the last frame (OFFRAMP_CLASSES values, offramp_exit_q8[k] gives their scale
 * and zero point), or 0 when that frame did not run far enough to make them. */
const int8_t *offramp_exit_logits_q8(int32_t k);

/* Measuring hooks: compiled with -DOFFRAMP_TRACE, the library calls offramp_trace (which the caller
 * defines) around every stage, decision, frame and kernel step (7 and 8 are the measuring harness's own). */
enum {
  OFFRAMP_TRACE_STAGE_BEGIN = 1, OFFRAMP_TRACE_STAGE_END = 2,
  OFFRAMP_TRACE_DECIDE_BEGIN = 3, OFFRAMP_TRACE_DECIDE_END = 4,
  OFFRAMP_TRACE_FRAME_BEGIN = 5, OFFRAMP_TRACE_FRAME_END = 6,
  OFFRAMP_TRACE_STEP_BEGIN = 9, OFFRAMP_TRACE_STEP_END = 10
};
#ifdef OFFRAMP_TRACE
void offramp_trace(int32_t event, int32_t index);
#endif

#endif

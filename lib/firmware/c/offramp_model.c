/* offramp_model.c: a frame through the stages, as far as the policy asks. Stages run on demand: an
 * exit's logits are made when the policy first asks for them, so a frame that stops early never
 * runs the later stages. Mirrors lib/firmware/interp.ts (Int8Classifier) and lib/policy. */
#include "offramp_model.h"

#ifdef OFFRAMP_TRACE
#define TRACE(event, index) offramp_trace((event), (index))
#else
#define TRACE(event, index) ((void)0)
#endif

static int32_t stages_done;   /* stages run for the current frame */
static int32_t frames;

static void run_to(int32_t stage) {
  while (stages_done <= stage) {
    TRACE(OFFRAMP_TRACE_STAGE_BEGIN, stages_done);
    offramp_run_steps(&offramp_net_stages[stages_done]);
    TRACE(OFFRAMP_TRACE_STAGE_END, stages_done);
    stages_done++;
  }
}

static const int8_t *logits_of(int32_t k) {
  run_to(offramp_exit_stage[k]);
  return offramp_logits_q8[k];
}

const int8_t *offramp_exit_logits_q8(int32_t k) {
  if (k < 0 || k > OFFRAMP_EXITS || offramp_exit_stage[k] >= stages_done) return 0;
  return offramp_logits_q8[k];
}

/* offramp_run_frame with the logits made on demand. */
static offramp_answer_t walk(const offramp_frame_policy_t *p, int32_t from) {
  offramp_frame_t s;
  offramp_answer_t a;
  int32_t k = from;
  offramp_frame_start(&s);
  for (; k < OFFRAMP_EXITS; k++) {
    const int8_t *q;
    int stop;
    if (k >= p->cap) break;
    q = logits_of(k);
    TRACE(OFFRAMP_TRACE_DECIDE_BEGIN, k);
    stop = offramp_decide_q8(p, &s, k, q, offramp_exit_q8[k]);
    TRACE(OFFRAMP_TRACE_DECIDE_END, k);
    if (stop) break;
  }
  a.exit = k;
  a.label = offramp_argmax_q8(logits_of(k));
  a.reused = 0;
  return a;
}

#if OFFRAMP_POLICY_STREAM
static offramp_stream_t stream;
static int stream_started;   /* a first frame without offramp_reset() starts the stream itself */

/* offramp_stream_step with the logits made on demand. */
static offramp_answer_t decide_frame(void) {
  const offramp_stream_policy_t *p = &offramp_policy;
  const int8_t *q[OFFRAMP_EXITS + 1];
  offramp_answer_t a, r;
  int32_t k, i;
  int forced, tested = 0;
  if (!stream_started) offramp_reset();
  k = offramp_stream_compare_exit(p, &stream);
  forced = offramp_stream_refresh_due(p, &stream);
  if (stream.scene >= 0 && !forced) {
    const int8_t *z = logits_of(k);
    int reuse;
    TRACE(OFFRAMP_TRACE_DECIDE_BEGIN, k);
    reuse = offramp_stream_test_q8(p, &stream, z, offramp_exit_q8[k]);
    TRACE(OFFRAMP_TRACE_DECIDE_END, k);
    if (reuse) { a.exit = k; a.label = stream.label; a.reused = 1; return a; }
    tested = 1;
  }
  /* a refresh runs on to the final output whatever `then` (a budget's cap included) would do */
  if (forced) { r.exit = OFFRAMP_EXITS; r.label = offramp_argmax_q8(logits_of(OFFRAMP_EXITS)); r.reused = 0; }
  else r = walk(&p->then, k > 0 ? k : 0);
  /* the scene opens on exits the walk ran through: only those logits are read */
  for (i = 0; i <= OFFRAMP_EXITS; i++) q[i] = offramp_logits_q8[i];
  TRACE(OFFRAMP_TRACE_DECIDE_BEGIN, r.exit);
  offramp_stream_open_q8(p, &stream, q, offramp_exit_q8, r.exit, r.label, tested);
  TRACE(OFFRAMP_TRACE_DECIDE_END, r.exit);
  a.exit = r.exit > k ? r.exit : k;
  a.label = r.label;
  a.reused = 0;
  return a;
}

void offramp_reset(void) { offramp_stream_start(&stream); stream_started = 1; }
#else
static offramp_answer_t decide_frame(void) { return walk(&offramp_policy, 0); }
void offramp_reset(void) { }
#endif

/* The whole network, no decision: the final output's answer. */
static offramp_answer_t whole_network(void) {
  offramp_answer_t a;
  a.exit = OFFRAMP_EXITS;
  a.label = offramp_argmax_q8(logits_of(OFFRAMP_EXITS));
  a.reused = 0;
  return a;
}

static void quantize_input(const float *input) {
  int32_t i;
  for (i = 0; i < OFFRAMP_INPUT_SIZE; i++) offramp_input_q8[i] = offramp_quantize_value(input[i], offramp_input_q8_params.scale, offramp_input_q8_params.zero_point);
}

/* One frame whose int8 input is in place: `answer` decides it; a frame region spans it (the input's
 * quantization included, begun by the caller). */
static offramp_answer_t frame(offramp_answer_t (*answer)(void)) {
  offramp_answer_t a;
  stages_done = 0;
  a = answer();
  TRACE(OFFRAMP_TRACE_FRAME_END, frames);
  frames++;
  return a;
}

offramp_answer_t offramp_classify(const float *input) {
  TRACE(OFFRAMP_TRACE_FRAME_BEGIN, frames);
  quantize_input(input);
  return frame(decide_frame);
}

offramp_answer_t offramp_classify_q8(const int8_t *input) {
  int32_t i;
  TRACE(OFFRAMP_TRACE_FRAME_BEGIN, frames);
  for (i = 0; i < OFFRAMP_INPUT_SIZE; i++) offramp_input_q8[i] = input[i];
  return frame(decide_frame);
}

offramp_answer_t offramp_classify_full(const float *input) {
  TRACE(OFFRAMP_TRACE_FRAME_BEGIN, frames);
  quantize_input(input);
  return frame(whole_network);
}

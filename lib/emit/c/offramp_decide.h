/* offramp_decide.h: exit decisions for a firmware (offramp library code, the same for every model).
 *
 * The model's sizes come from offramp_config.h, generated beside this file (emit-c writes it):
 *   OFFRAMP_EXITS    early exits; exit index OFFRAMP_EXITS is the model's final output
 *   OFFRAMP_CLASSES  logits per exit
 * The chosen policy is generated into offramp_policy.c (`offramp_policy`, declared in offramp_policy.h).
 *
 * Single precision only: no double, no libm. Scores, softmax and distances are float, exp and log our own,
 * and offramp's tuner (lib/policy) computes the same operations in the same order rounded to float, so a
 * decision here equals the tuner's bit for bit, provided the compiler neither contracts a * b + c into a
 * fused multiply-add nor keeps float intermediates wider than float: compile as ISO C (-std=c99, under
 * which gcc defaults to -ffp-contract=off) or pass -ffp-contract=off, on a target with FLT_EVAL_METHOD 0
 * (any hardware float unit: Cortex-M4F/M7/M33/M55, x86-64 SSE); never -ffast-math.
 * On int8 logits (the _q8 functions) the label is an integer argmax, and a score first dequantizes
 * ((q - zero_point) * scale in float, as ONNX DequantizeLinear does). */
#ifndef OFFRAMP_DECIDE_H
#define OFFRAMP_DECIDE_H

#include <stdint.h>
#include "offramp_config.h"

#if !defined(OFFRAMP_EXITS) || !defined(OFFRAMP_CLASSES) || OFFRAMP_EXITS < 0 || OFFRAMP_CLASSES < 1
#error "offramp_config.h must define OFFRAMP_EXITS (>= 0) and OFFRAMP_CLASSES (>= 1)"
#endif

typedef enum {
  OFFRAMP_CONFIDENCE = 0, OFFRAMP_ENTROPY = 1, OFFRAMP_MARGIN = 2, OFFRAMP_PATIENCE = 3, OFFRAMP_BUDGET = 4,
  OFFRAMP_DIFFERENCE = 5, OFFRAMP_AGREEING = 6, OFFRAMP_NO_SCORE = -1
} offramp_kind_t;

typedef enum { OFFRAMP_L1 = 0, OFFRAMP_L2 = 1, OFFRAMP_COSINE = 2, OFFRAMP_JS = 3 } offramp_distance_t;

/* A per-frame policy. Exits 0 … OFFRAMP_EXITS-1 are the heads; OFFRAMP_EXITS is the final output.
 * (threshold has one slot more than exits so that a chain without exits still declares a valid array.) */
typedef struct {
  offramp_kind_t kind;                  /* OFFRAMP_CONFIDENCE … OFFRAMP_BUDGET */
  offramp_kind_t score;                 /* score compared: the kind, a budget's score, or OFFRAMP_NO_SCORE */
  int32_t patience;                     /* OFFRAMP_PATIENCE: equal predictions in a row that stop */
  int32_t cap;                          /* deepest exit allowed (budget); OFFRAMP_EXITS otherwise */
  uint8_t on[OFFRAMP_EXITS + 1];        /* 1 where a decision is made */
  float threshold[OFFRAMP_EXITS + 1];   /* stop at exit k when score >= threshold[k] (entropy: <=) */
} offramp_frame_policy_t;

/* A stream policy: reuse the scene's label while the frame's softmax stays within threshold of the scene's reference. */
typedef struct {
  offramp_kind_t kind;              /* OFFRAMP_DIFFERENCE or OFFRAMP_AGREEING */
  offramp_distance_t distance;
  float threshold;                  /* reuse when distance < threshold */
  int32_t exit;                     /* OFFRAMP_DIFFERENCE: the exit compared */
  int32_t refresh;                  /* R: one frame in any R in a row runs on to the final output; 0: never */
  offramp_frame_policy_t then;      /* walk on a scene change */
} offramp_stream_policy_t;

typedef struct { float scale; int32_t zero_point; } offramp_q8_t;   /* int8 logits of one exit */

typedef struct { int32_t last, run; } offramp_frame_t;   /* patience's memory within one sample */

typedef struct {
  int32_t scene;                    /* -1 before the first frame */
  int32_t exit;                     /* exit the scene compares at */
  int32_t label;                    /* the scene's result */
  int32_t ref;                      /* which of buf holds the scene's reference softmax */
  int32_t age;                      /* frames since the last one that reached the final output */
  float buf[2][OFFRAMP_CLASSES];
} offramp_stream_t;

typedef struct { int32_t exit, label; } offramp_result_t;
typedef struct { int32_t exit, label, reused, scene; } offramp_stream_result_t;

/* float exp, log and square root without libm: exp within 0.94 ulp, log within 0.92 ulp of the exact value over
 * every float32 (measured), 99 % of results correctly rounded; sqrt correctly rounded. */
float offramp_exp(float x);
float offramp_log(float x);
float offramp_sqrt(float x);

/* Scores over one exit's OFFRAMP_CLASSES logits. */
int32_t offramp_argmax(const float *z);
void offramp_softmax(const float *z, float *out);
float offramp_confidence(const float *z);
float offramp_margin(const float *z);
float offramp_entropy(const float *z);
float offramp_distance(offramp_distance_t kind, const float *p, const float *q);

/* Per-frame policies: exit by exit (offramp_frame_start, then offramp_decide at exits 0, 1, … until it says 1),
 * or with every exit's logits at hand (offramp_run_frame). */
void offramp_frame_start(offramp_frame_t *s);
int offramp_decide(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const float *z);
offramp_result_t offramp_run_frame(const offramp_frame_policy_t *p, const float *const z[OFFRAMP_EXITS + 1], int32_t from);

/* Stream policies: one offramp_stream_t per stream. A frame: offramp_stream_compare_exit (run to it),
 * offramp_stream_refresh_due, offramp_stream_test (1: reuse), else walk on with then and offramp_stream_open;
 * offramp_stream_step does all of it with every exit's logits at hand. */
void offramp_stream_start(offramp_stream_t *s);
int32_t offramp_stream_compare_exit(const offramp_stream_policy_t *p, const offramp_stream_t *s);
int offramp_stream_refresh_due(const offramp_stream_policy_t *p, const offramp_stream_t *s);
int offramp_stream_test(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *z);
void offramp_stream_open(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *const z[OFFRAMP_EXITS + 1], int32_t stop, int32_t label, int tested);
offramp_stream_result_t offramp_stream_step(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *const z[OFFRAMP_EXITS + 1]);

/* The same on int8 logits with each exit's scale and zero point. */
void offramp_dequantize(const int8_t *q, offramp_q8_t qp, float *out);
int32_t offramp_argmax_q8(const int8_t *q);
int offramp_decide_q8(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const int8_t *q, offramp_q8_t qp);
offramp_result_t offramp_run_frame_q8(const offramp_frame_policy_t *p, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t from);
int offramp_stream_test_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *q, offramp_q8_t qp);
void offramp_stream_open_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t stop, int32_t label, int tested);
offramp_stream_result_t offramp_stream_step_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1]);

#endif

/* offramp_decide.c: exit decisions for a firmware (offramp library code, the same for every model).
 * The arithmetic of offramp's lib/policy (scores.ts, distance.ts, policy.ts, stream.ts), line by line
 * and in the same order, in float: the TypeScript rounds each operation to float32 (Math.fround), so
 * both give the same bits when this file is compiled as ISO C99 (-std=c99 makes gcc default to
 * -ffp-contract=off: no fused multiply-add, which would round once where the TypeScript rounds twice;
 * the pragmas below say the same to compilers that read them). See offramp_decide.h. */
#include "offramp_decide.h"

#if defined(__clang__)
#pragma STDC FP_CONTRACT OFF
#elif defined(__GNUC__)
#pragma GCC optimize ("fp-contract=off")
#endif

#define N OFFRAMP_CLASSES

typedef union { float f; uint32_t u; } offramp_bits_t;
static uint32_t to_bits(float x) { offramp_bits_t b; b.f = x; return b.u; }
static float from_bits(uint32_t u) { offramp_bits_t b; b.u = u; return b.f; }
/* 2^k, -126 <= k <= 127 */
static float pow2(int32_t k) { return from_bits((uint32_t)(k + 127) << 23); }

/* ln 2 in two parts: LN2_HI has 15 significant bits, so k * LN2_HI is exact for |k| < 2^8. */
static const float LN2_HI = 0x1.62e4p-1f, LN2_LO = 0x1.7f7d1cp-20f, LOG2E = 0x1.715476p0f;
static const float EXP_MAX = 0x1.62e42ep6f;    /* the largest x whose exp is below 2^128 */
static const float EXP_MIN = -0x1.9fe36ap6f;   /* below it exp rounds to 0 */
/* 1/n!, n = 2 … 7 */
static const float E2 = 0x1p-1f, E3 = 0x1.555556p-3f, E4 = 0x1.555556p-5f, E5 = 0x1.111112p-7f, E6 = 0x1.6c16c2p-10f, E7 = 0x1.a01a02p-13f;
/* 2/(2n+1), n = 1 … 4 */
static const float L1 = 0x1.555556p-1f, L2 = 0x1.99999ap-2f, L3 = 0x1.24924ap-2f, L4 = 0x1.c71c72p-3f;
static const float JS_SCALE = 0x1.715476p-1f;  /* 1 / (2 ln 2): half the sum of two KL terms, nats to bits */

/* exp: x = k ln2 + r, k = round(x log2 e), r = hi - lo with hi = x - k LN2_HI (exact by Sterbenz) and
 * lo = k LN2_LO; exp(r) = 1 + (hi + (r^2 P(r) - lo)) with P the Taylor series to r^5/7!, then times 2^k in exact steps
 * (the last of two rounds when the result is subnormal). */
float offramp_exp(float x) {
  float t, hi, lo, r, p, y;
  int32_t k;
  if (x != x) return x;
  if (x > EXP_MAX) return from_bits(0x7f800000u);
  if (x < EXP_MIN) return 0.0f;
  t = x * LOG2E;
  k = (int32_t)(t + (t < 0.0f ? -0.5f : 0.5f));
  hi = x - (float)k * LN2_HI;
  lo = (float)k * LN2_LO;
  r = hi - lo;
  p = E2 + r * (E3 + r * (E4 + r * (E5 + r * (E6 + r * E7))));
  y = 1.0f + (hi + ((r * r) * p - lo));   /* the exact hi leads: r's rounding stays out of the sum */
  if (k > 127) return (y * 2.0f) * pow2(k - 1);
  if (k >= -126) return y * pow2(k);
  return (y * pow2(k + 64)) * pow2(-64);
}

/* log: x = 2^k m, sqrt(1/2) <= m < sqrt(2), f = m - 1 (exact), s = f / (2 + f); log m = 2 atanh s
 * = f - (f^2/2 - s (f^2/2 + R)), R = 2s^2/3 + 2s^4/5 + 2s^6/7 + 2s^8/9; plus k ln2 in two parts. */
float offramp_log(float x) {
  uint32_t u, m;
  int32_t k = 0;
  float f, s, z, r, hfsq, lm;
  if (x != x || x < 0.0f) return from_bits(0x7fc00000u);
  if (x == 0.0f) return from_bits(0xff800000u);
  u = to_bits(x);
  if (u == 0x7f800000u) return x;
  if (u < 0x00800000u) { u = to_bits(x * 0x1p25f); k = -25; }   /* subnormal: scale by 2^25 first */
  k += (int32_t)(u >> 23) - 127;
  m = u & 0x007fffffu;
  if ((m | 0x3f800000u) >= 0x3fb504f3u) { m |= 0x3f000000u; k += 1; } else m |= 0x3f800000u;
  f = from_bits(m) - 1.0f;
  s = f / (2.0f + f);
  z = s * s;
  r = z * (L1 + z * (L2 + z * (L3 + z * L4)));
  hfsq = (0.5f * f) * f;
  lm = f - (hfsq - s * (hfsq + r));
  if (k == 0) return lm;
  return (float)k * LN2_HI + (lm + (float)k * LN2_LO);
}

/* Square root, correctly rounded (IEEE 754), as the TypeScript's Math.fround(Math.sqrt(x)) of a float.
 * With a single-precision unit, its instruction; elsewhere the integer square root of the significand. */
float offramp_sqrt(float x) {
#if defined(__GNUC__) && defined(__ARM_FP) && (__ARM_FP & 4) && !defined(__aarch64__)
  float y;
  __asm__("vsqrt.f32 %0, %1" : "=t"(y) : "t"(x));
  return y;
#else
  uint32_t u = to_bits(x), root;
  uint64_t v, rem;
  int32_t e;
  if (x != x || x < 0.0f) return from_bits(0x7fc00000u);
  if (x == 0.0f || u == 0x7f800000u) return x;
  e = (int32_t)(u >> 23);
  v = u & 0x007fffffu;
  if (e == 0) { e = 1; while (!(v & 0x00800000u)) { v <<= 1; e--; } }   /* subnormal: normalise */
  else v |= 0x00800000u;
  e -= 127;                                  /* x = v 2^(e - 23), v in [2^23, 2^24) */
  v <<= (e & 1) ? 24 : 23;                   /* v in [2^46, 2^48), so its root has 24 bits */
  e = (e - ((e & 1) ? 1 : 0)) / 2;           /* the root's exponent */
  rem = v;
  /* bit by bit: root = floor(sqrt(v)), rem = v - root^2 */
  {
    uint64_t r = 0, b = (uint64_t)1 << 46;
    while (b > rem) b >>= 2;
    while (b) {
      if (rem >= r + b) { rem -= r + b; r = (r >> 1) + b; } else r >>= 1;
      b >>= 2;
    }
    root = (uint32_t)r;
  }
  if (rem > root) root++;                    /* to nearest: v > root^2 + root means nearer root + 1 (no ties) */
  return from_bits(((uint32_t)(e + 126) << 23) + root);
#endif
}

/* Ties go to the lowest index, as in lib/policy (and numpy.argmax). */
int32_t offramp_argmax(const float *z) {
  int32_t best = 0, i;
  float m = z[0];
  for (i = 1; i < N; i++) if (z[i] > m) { m = z[i]; best = i; }
  return best;
}

static float max_of(const float *z) {
  float m = z[0];
  int32_t i;
  for (i = 1; i < N; i++) if (z[i] > m) m = z[i];
  return m;
}

void offramp_softmax(const float *z, float *out) {
  float m = max_of(z), s = 0.0f, r;
  int32_t i;
  for (i = 0; i < N; i++) { float e = offramp_exp(z[i] - m); out[i] = e; s += e; }
  r = 1.0f / s;
  for (i = 0; i < N; i++) out[i] *= r;
}

/* Top-1 probability without normalising: 1 / sum exp(z_i - max). */
float offramp_confidence(const float *z) {
  float m = max_of(z), s = 0.0f;
  int32_t i;
  for (i = 0; i < N; i++) s += offramp_exp(z[i] - m);
  return 1.0f / s;
}

/* Top-1 minus top-2 probability. */
float offramp_margin(const float *z) {
  int32_t i, i1 = 0, i2 = -1;
  float m, s = 0.0f;
  if (N < 2) return 1.0f;
  for (i = 1; i < N; i++) {
    float v = z[i];
    if (v > z[i1]) { i2 = i1; i1 = i; } else if (i2 < 0 || v > z[i2]) i2 = i;
  }
  m = z[i1];
  for (i = 0; i < N; i++) s += offramp_exp(z[i] - m);
  return (1.0f - offramp_exp(z[i2] - m)) / s;
}

/* Normalised entropy in [0, 1]: (ln s - sum e_i d_i / s) / ln N, clamped (a uniform vector rounds a few ulps above 1). */
float offramp_entropy(const float *z) {
  float m, s = 0.0f, t = 0.0f, h;
  int32_t i;
  if (N < 2) return 0.0f;
  m = max_of(z);
  for (i = 0; i < N; i++) { float d = z[i] - m; float e = offramp_exp(d); s += e; t += e * d; }
  h = (offramp_log(s) - t / s) / offramp_log((float)N);
  return h < 0.0f ? 0.0f : h > 1.0f ? 1.0f : h;
}

float offramp_distance(offramp_distance_t kind, const float *p, const float *q) {
  float s = 0.0f, pq = 0.0f, pp = 0.0f, qq = 0.0f;
  int32_t i;
  switch (kind) {
    case OFFRAMP_L1:
      for (i = 0; i < N; i++) { float d = p[i] - q[i]; s += d < 0.0f ? -d : d; }
      return s;
    case OFFRAMP_L2:
      for (i = 0; i < N; i++) { float d = p[i] - q[i]; s += d * d; }
      return offramp_sqrt(s);
    case OFFRAMP_COSINE:
      for (i = 0; i < N; i++) { pq += p[i] * q[i]; pp += p[i] * p[i]; qq += q[i] * q[i]; }
      return 1.0f - pq / offramp_sqrt(pp * qq);
    case OFFRAMP_JS:
      /* Jensen-Shannon divergence in bits, 0 log 0 = 0 */
      for (i = 0; i < N; i++) {
        float m = 0.5f * (p[i] + q[i]);
        if (p[i] > 0.0f) s += p[i] * offramp_log(p[i] / m);
        if (q[i] > 0.0f) s += q[i] * offramp_log(q[i] / m);
      }
      return s * JS_SCALE;
  }
  return 0.0f;
}

void offramp_frame_start(offramp_frame_t *s) { s->last = -1; s->run = 0; }

/* Patience: the exit's label extends or restarts the run of equal labels; stop once it is long enough. */
static int patience_step(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t label) {
  s->run = label == s->last ? s->run + 1 : 1;
  s->last = label;
  return s->run >= p->patience;
}

/* Exit k (< OFFRAMP_EXITS) has its logits z: stop here? Label = offramp_argmax(z) when it says yes. */
int offramp_decide(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const float *z) {
  float t;
  if (k >= p->cap) return 1;
  if (p->kind == OFFRAMP_PATIENCE) return patience_step(p, s, offramp_argmax(z));
  if (p->score == OFFRAMP_NO_SCORE || !p->on[k]) return 0;
  t = p->threshold[k];
  switch (p->score) {
    case OFFRAMP_CONFIDENCE: return offramp_confidence(z) >= t;
    case OFFRAMP_MARGIN: return offramp_margin(z) >= t;
    case OFFRAMP_ENTROPY: return offramp_entropy(z) <= t;
    default: return 0;
  }
}

offramp_result_t offramp_run_frame(const offramp_frame_policy_t *p, const float *const z[OFFRAMP_EXITS + 1], int32_t from) {
  offramp_frame_t s;
  offramp_result_t r;
  int32_t k = from;
  offramp_frame_start(&s);
  for (; k < OFFRAMP_EXITS; k++) {
    if (k >= p->cap) break;
    if (offramp_decide(p, &s, k, z[k])) break;
  }
  r.exit = k;
  r.label = offramp_argmax(z[k]);
  return r;
}

void offramp_stream_start(offramp_stream_t *s) {
  int32_t i;
  s->scene = -1; s->exit = -1; s->label = -1; s->ref = 0; s->age = 0;
  for (i = 0; i < N; i++) { s->buf[0][i] = 0.0f; s->buf[1][i] = 0.0f; }
}

/* The exit to run the frame to before anything is decided; -1: none (agreeing, no scene yet). */
int32_t offramp_stream_compare_exit(const offramp_stream_policy_t *p, const offramp_stream_t *s) {
  return s->scene >= 0 ? s->exit : p->kind == OFFRAMP_DIFFERENCE ? p->exit : -1;
}

/* 1: R-1 frames in a row stopped short of the final output; this one runs on to it, untested. */
int offramp_stream_refresh_due(const offramp_stream_policy_t *p, const offramp_stream_t *s) {
  return p->refresh > 0 && s->scene >= 0 && s->age >= p->refresh - 1;
}

/* Needs a scene. 1: reuse s->label for this frame (the scene ages by one frame). */
int offramp_stream_test(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *z) {
  float *probs = s->buf[1 - s->ref];
  float d;
  int reuse;
  offramp_softmax(z, probs);
  d = offramp_distance(p->distance, probs, s->buf[s->ref]);
  /* agreeing: a change of label opens a scene even within the threshold */
  reuse = d < p->threshold && (p->kind != OFFRAMP_AGREEING || offramp_argmax(probs) == s->label);
  if (reuse) s->age = s->exit >= OFFRAMP_EXITS ? 0 : s->age + 1;
  return reuse;
}

/* Open a scene with this frame, whose walk stopped at exit stop with label; tested: offramp_stream_test ran on it. */
void offramp_stream_open(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *const z[OFFRAMP_EXITS + 1], int32_t stop, int32_t label, int tested) {
  int32_t k = p->kind == OFFRAMP_DIFFERENCE ? p->exit : 0;
  if (p->kind == OFFRAMP_AGREEING) while (k < stop && offramp_argmax(z[k]) != label) k++;
  if (tested && k == s->exit) s->ref = 1 - s->ref;
  else offramp_softmax(z[k], s->buf[s->ref]);
  s->scene += 1;
  s->exit = k;
  s->label = label;
  s->age = stop >= OFFRAMP_EXITS ? 0 : s->age + 1;
}

offramp_stream_result_t offramp_stream_step(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *const z[OFFRAMP_EXITS + 1]) {
  offramp_stream_result_t out;
  offramp_result_t r;
  int32_t k = offramp_stream_compare_exit(p, s);
  int tested = 0, forced = offramp_stream_refresh_due(p, s);
  if (s->scene >= 0 && !forced) {
    if (offramp_stream_test(p, s, z[k])) { out.exit = k; out.label = s->label; out.reused = 1; out.scene = s->scene; return out; }
    tested = 1;
  }
  /* a refresh runs on to the final output whatever then (a budget's cap included) would do */
  if (forced) { r.exit = OFFRAMP_EXITS; r.label = offramp_argmax(z[OFFRAMP_EXITS]); }
  else r = offramp_run_frame(&p->then, z, k > 0 ? k : 0);
  /* difference without a scene: the reference exit was run, so the walk ends no shallower than it */
  out.exit = r.exit > k ? r.exit : k;
  out.label = r.label;
  out.reused = 0;
  offramp_stream_open(p, s, z, r.exit, r.label, tested);
  out.scene = s->scene;
  return out;
}

/* int8 logits: (q - zero_point) * scale in float, as ONNX DequantizeLinear computes it; then the float path. */
void offramp_dequantize(const int8_t *q, offramp_q8_t qp, float *out) {
  int32_t i;
  for (i = 0; i < N; i++) out[i] = (float)((int32_t)q[i] - qp.zero_point) * qp.scale;
}

/* Integer domain: exact for a positive normal scale (distinct integers stay distinct and ordered once scaled). */
int32_t offramp_argmax_q8(const int8_t *q) {
  int32_t best = 0, i;
  int8_t m = q[0];
  for (i = 1; i < N; i++) if (q[i] > m) { m = q[i]; best = i; }
  return best;
}

int offramp_decide_q8(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const int8_t *q, offramp_q8_t qp) {
  float z[N];
  if (k >= p->cap) return 1;
  if (p->kind == OFFRAMP_PATIENCE) return patience_step(p, s, offramp_argmax_q8(q));
  if (p->score == OFFRAMP_NO_SCORE || !p->on[k]) return 0;   /* nothing to score: no dequantizing either */
  offramp_dequantize(q, qp, z);
  return offramp_decide(p, s, k, z);
}

static void dequantize_all(const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], float buf[OFFRAMP_EXITS + 1][N], const float *z[OFFRAMP_EXITS + 1]) {
  int32_t k;
  for (k = 0; k <= OFFRAMP_EXITS; k++) { offramp_dequantize(q[k], qp[k], buf[k]); z[k] = buf[k]; }
}

offramp_result_t offramp_run_frame_q8(const offramp_frame_policy_t *p, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t from) {
  offramp_frame_t s;
  offramp_result_t r;
  int32_t k = from;
  offramp_frame_start(&s);
  for (; k < OFFRAMP_EXITS; k++) {
    if (k >= p->cap) break;
    if (offramp_decide_q8(p, &s, k, q[k], qp[k])) break;
  }
  r.exit = k;
  r.label = offramp_argmax_q8(q[k]);
  return r;
}

int offramp_stream_test_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *q, offramp_q8_t qp) {
  float z[N];
  offramp_dequantize(q, qp, z);
  return offramp_stream_test(p, s, z);
}

void offramp_stream_open_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t stop, int32_t label, int tested) {
  float z[N];
  int32_t k = p->kind == OFFRAMP_DIFFERENCE ? p->exit : 0;
  if (p->kind == OFFRAMP_AGREEING) while (k < stop && offramp_argmax_q8(q[k]) != label) k++;
  if (tested && k == s->exit) s->ref = 1 - s->ref;
  else { offramp_dequantize(q[k], qp[k], z); offramp_softmax(z, s->buf[s->ref]); }
  s->scene += 1;
  s->exit = k;
  s->label = label;
  s->age = stop >= OFFRAMP_EXITS ? 0 : s->age + 1;
}

offramp_stream_result_t offramp_stream_step_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1]) {
  float buf[OFFRAMP_EXITS + 1][N];
  const float *z[OFFRAMP_EXITS + 1];
  dequantize_all(q, qp, buf, z);
  return offramp_stream_step(p, s, z);
}

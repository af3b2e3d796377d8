// The fixed part of offramp_policy.c: the decision arithmetic of lib/policy,
// line by line in C99. Sums and scores are double because the TypeScript works
// in float64; exp and log are our own, with the operation sequence of the
// classic fdlibm routines that V8's Math.exp and Math.log use, so results agree
// to the last bit with the tuner (a platform libm differs in ~1 of 10 results,
// and the tuner's thresholds are scores of real samples: one ulp flips a tie).
// sqrt is IEEE correctly rounded everywhere, so the platform's is used.

/** Types and prototypes (header, after the generated constants). */
export const C_DECLARATIONS = `typedef enum {
  OFFRAMP_CONFIDENCE = 0, OFFRAMP_ENTROPY = 1, OFFRAMP_MARGIN = 2, OFFRAMP_PATIENCE = 3, OFFRAMP_BUDGET = 4,
  OFFRAMP_DIFFERENCE = 5, OFFRAMP_AGREEING = 6, OFFRAMP_NO_SCORE = -1
} offramp_kind_t;

typedef enum { OFFRAMP_L1 = 0, OFFRAMP_L2 = 1, OFFRAMP_COSINE = 2, OFFRAMP_JS = 3 } offramp_distance_t;

typedef struct {
  const char *name;
  const char *dtype;
  uint32_t elements;   /* 0 where the shape was not concrete */
  uint32_t bytes;
  uint32_t arena_offset;   /* where the stage keeps it in its arena; OFFRAMP_NO_OFFSET without an arena plan */
} offramp_tensor_t;

/* An activation's place in its stage's arena: bytes [offset, offset + bytes) from the arena's start (aligned to
 * OFFRAMP_ARENA_ALIGN), needed from node first to node last of the stage file (inclusive, positions in the file's
 * node list; the stage's inputs from 0, its outputs to the last node). Buffers whose node spans meet never share bytes. */
typedef struct {
  const char *name;
  uint32_t offset, bytes;
  uint32_t first, last;
} offramp_buffer_t;

typedef struct {
  const char *file;
  uint64_t macs;
  uint32_t first_input, inputs;     /* range of offramp_tensors */
  uint32_t first_output, outputs;   /* range of offramp_tensors */
  uint32_t input_elements, input_bytes, output_elements, output_bytes;
  uint32_t weight_bytes, peak_activation_bytes;
  uint32_t arena_bytes;             /* the stage's arena plan: at least peak_activation_bytes; 0 without a plan */
  uint32_t first_buffer, buffers;   /* range of offramp_buffers */
  int32_t first_exit, exits;        /* exits this stage makes (first_exit -1: none; OFFRAMP_EXITS: the final output) */
} offramp_stage_t;

/* A per-frame policy. Exits 0 … OFFRAMP_EXITS-1 are the heads; OFFRAMP_EXITS is the final output. */
typedef struct {
  offramp_kind_t kind;              /* OFFRAMP_CONFIDENCE … OFFRAMP_BUDGET */
  offramp_kind_t score;             /* score compared: the kind, a budget's score, or OFFRAMP_NO_SCORE */
  int32_t patience;                 /* OFFRAMP_PATIENCE: equal predictions in a row that stop */
  int32_t cap;                      /* deepest exit allowed (budget); OFFRAMP_EXITS otherwise */
  uint8_t on[OFFRAMP_EXITS];        /* 1 where a decision is made */
  double threshold[OFFRAMP_EXITS];  /* stop at exit k when score >= threshold[k] (entropy: <=) */
} offramp_frame_policy_t;

/* A stream policy: reuse the scene's label while the frame's softmax stays within threshold of the scene's reference. */
typedef struct {
  offramp_kind_t kind;              /* OFFRAMP_DIFFERENCE or OFFRAMP_AGREEING */
  offramp_distance_t distance;
  double threshold;                 /* reuse when distance < threshold */
  int32_t exit;                     /* OFFRAMP_DIFFERENCE: the exit compared */
  int32_t refresh;                  /* R: one frame in any R in a row runs on to the final output; 0: never */
  offramp_frame_policy_t then;      /* walk on a scene change */
} offramp_stream_policy_t;

typedef struct { float scale; int32_t zero_point; } offramp_q8_t;

typedef struct { int32_t last, run; } offramp_frame_t;   /* patience's memory within one sample */

typedef struct {
  int32_t scene;                    /* -1 before the first frame */
  int32_t exit;                     /* exit the scene compares at */
  int32_t label;                    /* the scene's result */
  int32_t ref;                      /* which of buf holds the scene's reference softmax */
  int32_t age;                      /* frames since the last one that reached the final output */
  double buf[2][OFFRAMP_CLASSES];
} offramp_stream_t;

typedef struct { int32_t exit, label; } offramp_result_t;
typedef struct { int32_t exit, label, reused, scene; } offramp_stream_result_t;

double offramp_exp(double x);
double offramp_log(double x);

int32_t offramp_argmax(const float *z);
void offramp_softmax(const float *z, double *out);
double offramp_confidence(const float *z);
double offramp_margin(const float *z);
double offramp_entropy(const float *z);
double offramp_distance(offramp_distance_t kind, const double *p, const double *q);

void offramp_frame_start(offramp_frame_t *s);
int offramp_decide(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const float *z);
offramp_result_t offramp_run_frame(const offramp_frame_policy_t *p, const float *const z[OFFRAMP_EXITS + 1], int32_t from);

void offramp_stream_start(offramp_stream_t *s);
int32_t offramp_stream_compare_exit(const offramp_stream_policy_t *p, const offramp_stream_t *s);
int offramp_stream_refresh_due(const offramp_stream_policy_t *p, const offramp_stream_t *s);
int offramp_stream_test(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *z);
void offramp_stream_open(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *const z[OFFRAMP_EXITS + 1], int32_t stop, int32_t label, int tested);
offramp_stream_result_t offramp_stream_step(const offramp_stream_policy_t *p, offramp_stream_t *s, const float *const z[OFFRAMP_EXITS + 1]);

void offramp_dequantize(const int8_t *q, offramp_q8_t qp, float *out);
int32_t offramp_argmax_q8(const int8_t *q);
int offramp_decide_q8(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const int8_t *q, offramp_q8_t qp);
offramp_result_t offramp_run_frame_q8(const offramp_frame_policy_t *p, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t from);
int offramp_stream_test_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *q, offramp_q8_t qp);
void offramp_stream_open_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t stop, int32_t label, int tested);
offramp_stream_result_t offramp_stream_step_q8(const offramp_stream_policy_t *p, offramp_stream_t *s, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1]);
`;

/** Function bodies (source, after the generated tables). */
export const C_DEFINITIONS = `/* A fused multiply-add rounds once where the TypeScript rounds twice. */
#if defined(__clang__)
#pragma STDC FP_CONTRACT OFF
#elif defined(__GNUC__)
#pragma GCC optimize ("fp-contract=off")
#endif

#define N OFFRAMP_CLASSES

typedef union { double d; uint64_t u; } offramp_bits_t;
static uint32_t high_word(double x) { offramp_bits_t b; b.d = x; return (uint32_t)(b.u >> 32); }
static uint32_t low_word(double x) { offramp_bits_t b; b.d = x; return (uint32_t)b.u; }
static double set_high_word(double x, uint32_t h) { offramp_bits_t b; b.d = x; b.u = ((uint64_t)h << 32) | (b.u & 0xffffffffu); return b.d; }
static double pow2(int32_t k) { offramp_bits_t b; b.u = (uint64_t)(uint32_t)(0x3ff + k) << 52; return b.d; }

static const double LN2_HI = 6.93147180369123816490e-01, LN2_LO = 1.90821492927058770002e-10;
static const double EXP_P[5] = { 1.66666666666666019037e-01, -2.77777777770155933842e-03, 6.61375632143793436117e-05, -1.65339022054652515390e-06, 4.13813679705723846039e-08 };
static const double LOG_P[7] = { 6.666666666666735130e-01, 3.999999999940941908e-01, 2.857142874366239149e-01, 2.222219843214978396e-01, 1.818357216161805012e-01, 1.531383769920937332e-01, 1.479819860511658591e-01 };
static const double LN2 = 0x1.62e42fefa39efp-1;   /* Math.LN2 */

/* exp: x = k ln2 + r, |r| <= ln2/2, then a rational approximation of exp(r). */
double offramp_exp(double x) {
  uint32_t hx = high_word(x);
  int neg = (int)(hx >> 31);
  double hi = 0.0, lo = 0.0, t, c, y;
  int32_t k = 0;
  hx &= 0x7fffffffu;
  if (hx >= 0x40862e42u) {
    if (hx >= 0x7ff00000u) return ((hx & 0xfffffu) | low_word(x)) ? x + x : neg ? 0.0 : x;
    if (x > 7.09782712893383973096e+02) return 0x1p1023 * 2.0;
    if (x < -7.45133219101941108420e+02) return 0.0;
  }
  if (hx > 0x3fd62e42u) {
    if (x == 1.0) return 2.718281828459045;   /* V8 returns Math.E here */
    if (hx < 0x3ff0a2b2u) { hi = neg ? x + LN2_HI : x - LN2_HI; lo = neg ? -LN2_LO : LN2_LO; k = neg ? -1 : 1; }
    else { k = (int32_t)(1.44269504088896338700e+00 * x + (neg ? -0.5 : 0.5)); t = (double)k; hi = x - t * LN2_HI; lo = t * LN2_LO; }
    x = hi - lo;
  } else if (hx < 0x3e300000u) return 1.0 + x;
  t = x * x;
  c = x - t * (EXP_P[0] + t * (EXP_P[1] + t * (EXP_P[2] + t * (EXP_P[3] + t * EXP_P[4]))));
  if (k == 0) return 1.0 - ((x * c) / (c - 2.0) - x);
  y = 1.0 - ((lo - (x * c) / (2.0 - c)) - hi);
  if (k >= -1021) return k == 1024 ? y * 2.0 * 0x1p1023 : y * pow2(k);
  return y * pow2(k + 1000) * 0x1p-1000;
}

/* log: x = 2^k (1 + f), sqrt(2)/2 < 1 + f < sqrt(2), log(1 + f) from s = f / (2 + f). */
double offramp_log(double x) {
  uint32_t hx = high_word(x);
  int32_t k = 0, i, j;
  double f, s, z, w, r, hfsq, dk;
  if (hx < 0x00100000u || (hx >> 31)) {
    if (((hx & 0x7fffffffu) | low_word(x)) == 0) return -0x1p1023 * 2.0;
    if (hx >> 31) return (x - x) / 0.0;
    k -= 54; x *= 0x1p54; hx = high_word(x);   /* subnormal: scale up */
  }
  if (hx >= 0x7ff00000u) return x + x;
  k += (int32_t)(hx >> 20) - 1023;
  hx &= 0x000fffffu;
  i = (int32_t)((hx + 0x95f64u) & 0x100000u);
  x = set_high_word(x, hx | ((uint32_t)i ^ 0x3ff00000u));
  k += i >> 20;
  f = x - 1.0;
  dk = (double)k;
  if ((0x000fffffu & (2 + hx)) < 3) {
    if (f == 0.0) return k == 0 ? 0.0 : dk * LN2_HI + dk * LN2_LO;
    r = f * f * (0.5 - 0.33333333333333333 * f);
    return k == 0 ? f - r : dk * LN2_HI - ((r - dk * LN2_LO) - f);
  }
  s = f / (2.0 + f);
  z = s * s;
  w = z * z;
  i = (int32_t)hx - 0x6147a;
  j = 0x6b851 - (int32_t)hx;
  r = z * (LOG_P[0] + w * (LOG_P[2] + w * (LOG_P[4] + w * LOG_P[6]))) + w * (LOG_P[1] + w * (LOG_P[3] + w * LOG_P[5]));
  if ((i | j) > 0) {
    hfsq = 0.5 * f * f;
    return k == 0 ? f - (hfsq - s * (hfsq + r)) : dk * LN2_HI - ((hfsq - (s * (hfsq + r) + dk * LN2_LO)) - f);
  }
  return k == 0 ? f - s * (f - r) : dk * LN2_HI - ((s * (f - r) - dk * LN2_LO) - f);
}

/* Ties go to the lowest index, as in lib/policy (and numpy.argmax). */
int32_t offramp_argmax(const float *z) {
  int32_t best = 0, i;
  float m = z[0];
  for (i = 1; i < N; i++) if (z[i] > m) { m = z[i]; best = i; }
  return best;
}

static int32_t argmax_d(const double *p) {
  int32_t best = 0, i;
  double m = p[0];
  for (i = 1; i < N; i++) if (p[i] > m) { m = p[i]; best = i; }
  return best;
}

static double max_of(const float *z) {
  double m = z[0];
  int32_t i;
  for (i = 1; i < N; i++) if (z[i] > m) m = z[i];
  return m;
}

void offramp_softmax(const float *z, double *out) {
  double m = max_of(z), s = 0.0, r;
  int32_t i;
  for (i = 0; i < N; i++) { double e = offramp_exp((double)z[i] - m); out[i] = e; s += e; }
  r = 1.0 / s;
  for (i = 0; i < N; i++) out[i] *= r;
}

/* Top-1 probability without normalising: 1 / sum exp(z_i - max). */
double offramp_confidence(const float *z) {
  double m = max_of(z), s = 0.0;
  int32_t i;
  for (i = 0; i < N; i++) s += offramp_exp((double)z[i] - m);
  return 1.0 / s;
}

/* Top-1 minus top-2 probability. */
double offramp_margin(const float *z) {
  int32_t i, i1 = 0, i2 = -1;
  double m, s = 0.0;
  if (N < 2) return 1.0;
  for (i = 1; i < N; i++) {
    float v = z[i];
    if (v > z[i1]) { i2 = i1; i1 = i; } else if (i2 < 0 || v > z[i2]) i2 = i;
  }
  m = z[i1];
  for (i = 0; i < N; i++) s += offramp_exp((double)z[i] - m);
  return (1.0 - offramp_exp((double)z[i2] - m)) / s;
}

/* Normalised entropy in [0, 1]: (ln s - sum e_i d_i / s) / ln N, clamped (a uniform vector rounds a few ulps above 1). */
double offramp_entropy(const float *z) {
  double m, s = 0.0, t = 0.0, h;
  int32_t i;
  if (N < 2) return 0.0;
  m = max_of(z);
  for (i = 0; i < N; i++) { double d = (double)z[i] - m; double e = offramp_exp(d); s += e; t += e * d; }
  h = (offramp_log(s) - t / s) / offramp_log((double)N);
  return h < 0.0 ? 0.0 : h > 1.0 ? 1.0 : h;
}

double offramp_distance(offramp_distance_t kind, const double *p, const double *q) {
  double s = 0.0, pq = 0.0, pp = 0.0, qq = 0.0;
  int32_t i;
  switch (kind) {
    case OFFRAMP_L1:
      for (i = 0; i < N; i++) { double d = p[i] - q[i]; s += d < 0.0 ? -d : d; }
      return s;
    case OFFRAMP_L2:
      for (i = 0; i < N; i++) { double d = p[i] - q[i]; s += d * d; }
      return sqrt(s);
    case OFFRAMP_COSINE:
      for (i = 0; i < N; i++) { pq += p[i] * q[i]; pp += p[i] * p[i]; qq += q[i] * q[i]; }
      return 1.0 - pq / sqrt(pp * qq);
    case OFFRAMP_JS:
      /* Jensen-Shannon divergence in bits, 0 log 0 = 0 */
      for (i = 0; i < N; i++) {
        double m = 0.5 * (p[i] + q[i]);
        if (p[i] > 0.0) s += p[i] * offramp_log(p[i] / m);
        if (q[i] > 0.0) s += q[i] * offramp_log(q[i] / m);
      }
      return s * (0.5 / LN2);
  }
  return 0.0;
}

void offramp_frame_start(offramp_frame_t *s) { s->last = -1; s->run = 0; }

/* Exit k (< OFFRAMP_EXITS) has its logits z: stop here? Label = offramp_argmax(z) when it says yes. */
int offramp_decide(const offramp_frame_policy_t *p, offramp_frame_t *s, int32_t k, const float *z) {
  double t;
  if (k >= p->cap) return 1;
  if (p->kind == OFFRAMP_PATIENCE) {
    int32_t l = offramp_argmax(z);
    s->run = l == s->last ? s->run + 1 : 1;
    s->last = l;
    return s->run >= p->patience;
  }
  if (p->score == OFFRAMP_NO_SCORE || !p->on[k]) return 0;
  t = p->threshold[k];
  switch (p->score) {
    case OFFRAMP_CONFIDENCE: return offramp_confidence(z) >= t;
    case OFFRAMP_MARGIN: return offramp_margin(z) >= t;
    case OFFRAMP_ENTROPY: return -offramp_entropy(z) >= -t;
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
  for (i = 0; i < N; i++) { s->buf[0][i] = 0.0; s->buf[1][i] = 0.0; }
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
  double *probs = s->buf[1 - s->ref];
  double d;
  int reuse;
  offramp_softmax(z, probs);
  d = offramp_distance(p->distance, probs, s->buf[s->ref]);
  /* agreeing: a change of label opens a scene even within the threshold */
  reuse = d < p->threshold && (p->kind != OFFRAMP_AGREEING || argmax_d(probs) == s->label);
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
  if (p->kind == OFFRAMP_PATIENCE) {
    int32_t l = offramp_argmax_q8(q);
    s->run = l == s->last ? s->run + 1 : 1;
    s->last = l;
    return s->run >= p->patience;
  }
  offramp_dequantize(q, qp, z);
  return offramp_decide(p, s, k, z);
}

static void dequantize_all(const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], float buf[OFFRAMP_EXITS + 1][N], const float *z[OFFRAMP_EXITS + 1]) {
  int32_t k;
  for (k = 0; k <= OFFRAMP_EXITS; k++) { offramp_dequantize(q[k], qp[k], buf[k]); z[k] = buf[k]; }
}

offramp_result_t offramp_run_frame_q8(const offramp_frame_policy_t *p, const int8_t *const q[OFFRAMP_EXITS + 1], const offramp_q8_t qp[OFFRAMP_EXITS + 1], int32_t from) {
  float buf[OFFRAMP_EXITS + 1][N];
  const float *z[OFFRAMP_EXITS + 1];
  dequantize_all(q, qp, buf, z);
  return offramp_run_frame(p, z, from);
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
`;

// Multinomial logistic regression (softmax regression) on pooled features.
// Objective, with m rows: (1/m)·Σ loss_i + (l2/2)·‖W‖², the intercept unpenalised.
// loss_i is cross-entropy to a label, or T²·KL(p_i ‖ softmax(s_i/T)) to soft targets
// (the T² keeps gradient scale independent of T, as in knowledge distillation).
// In scikit-learn's terms (C·Σ CE + ½‖W‖²) this is l2 = 1/(C·m).
import { rowLoss } from './targets.js';
import { lbfgs } from './lbfgs.js';
import { allRows, heldOutSplit, type Features, type Targets } from './targets.js';

/** Parameters: W (k×d, row-major) then b (k), one Float64Array. */
export const paramCount = (d: number, k: number) => k * d + k;

/**
 * Objective over `rows` at params θ; writes its exact gradient into `grad` when given.
 * `l2` = 0 gives the data term alone (held-out loss).
 */
export function softmaxObjective(F: Features, T: Targets, rows: Int32Array, theta: Float64Array, l2: number, grad?: Float64Array): number {
  const { X, d } = F, k = T.k, m = rows.length;
  const W = theta.subarray(0, k * d), b = theta.subarray(k * d);
  const s = new Float64Array(k), e = new Float64Array(k);
  const temp = T.kind === 'soft' ? T.temperature : 1;
  if (grad) grad.fill(0);
  let total = 0;
  for (const r of rows) {
    const off = r * d;
    for (let c = 0; c < k; c++) {
      let z = b[c];
      const wo = c * d;
      for (let j = 0; j < d; j++) z += W[wo + j] * X[off + j];
      s[c] = z / temp;
    }
    total += rowLoss(s, e, k, T, r, temp);
    if (grad) {
      for (let c = 0; c < k; c++) {
        const ec = e[c];
        if (ec === 0) continue;
        const wo = c * d;
        for (let j = 0; j < d; j++) grad[wo + j] += ec * X[off + j];
        grad[k * d + c] += ec;
      }
    }
  }
  let reg = 0;
  for (let i = 0; i < k * d; i++) reg += W[i] * W[i];
  if (grad) {
    for (let i = 0; i < grad.length; i++) grad[i] /= m;
    for (let i = 0; i < k * d; i++) grad[i] += l2 * W[i];
  }
  return total / m + 0.5 * l2 * reg;
}

export interface FitOptions {
  /** L2 strength on weights (default 1e-5) */
  l2?: number;
  seed?: number;
  /** share of rows held out for early stopping and scoring (default 0.1; 0: none) */
  heldOut?: number;
  /** stop after this many iterations without a better held-out loss (default 20) */
  patience?: number;
  maxIter?: number;
}

export interface LinearFit {
  W: Float64Array; b: Float64Array; d: number; k: number;
  /** training objective at the returned parameters */
  loss: number;
  /** held-out data loss at the returned parameters (NaN without held-out rows) */
  heldOutLoss: number;
  iterations: number;
  reason: string;
  split: { train: Int32Array; held: Int32Array };
}

export function fitSoftmax(F: Features, T: Targets, o: FitOptions = {}): LinearFit {
  const l2 = o.l2 ?? 1e-5, patience = o.patience ?? 20;
  const split = o.heldOut === 0 ? { train: allRows(F.n), held: new Int32Array(0) } : heldOutSplit(F.n, o.heldOut ?? 0.1, o.seed ?? 1);
  const { d } = F, k = T.k;
  // L-BFGS runs in standardised coordinates (W' = W·s, b' = b + W·μ): the same
  // objective and minimiser, but pooled activations of very different scales no
  // longer make it ill-conditioned.
  const { mu, sd: sigma } = moments(F, split.train);
  // Scale by sqrt(σ² + l2), not σ: a nearly dead channel (σ → 0) would otherwise get curvature l2/σ².
  const sd = sigma.map((s) => Math.sqrt(s * s + l2));
  const toRaw = (u: Float64Array) => {
    const t = new Float64Array(u.length);
    for (let c = 0; c < k; c++) {
      let shift = 0;
      for (let j = 0; j < d; j++) { const w = u[c * d + j] / sd[j]; t[c * d + j] = w; shift += w * mu[j]; }
      t[k * d + c] = u[k * d + c] - shift;
    }
    return t;
  };
  const gRaw = new Float64Array(paramCount(d, k));
  const objective = (u: Float64Array, g: Float64Array) => {
    const f = softmaxObjective(F, T, split.train, toRaw(u), l2, gRaw);
    for (let c = 0; c < k; c++) {
      const gb = gRaw[k * d + c];
      for (let j = 0; j < d; j++) g[c * d + j] = (gRaw[c * d + j] - gb * mu[j]) / sd[j];
      g[k * d + c] = gb;
    }
    return f;
  };
  // Zero start: the objective is convex, so the start only changes the path, and zeros need no seed.
  const u0 = new Float64Array(paramCount(d, k));
  let best = { theta: toRaw(u0), held: split.held.length ? softmaxObjective(F, T, split.held, toRaw(u0), 0) : NaN, iter: 0 };
  const res = lbfgs(objective, u0, {
    maxIter: o.maxIter ?? 500,
    onIter: split.held.length ? (iter, u) => {
      const theta = toRaw(u), h = softmaxObjective(F, T, split.held, theta, 0);
      if (h < best.held) best = { theta, held: h, iter };
      return iter - best.iter >= patience;
    } : undefined,
  });
  const theta = split.held.length ? best.theta : toRaw(res.x);
  return {
    W: theta.slice(0, k * d), b: theta.slice(k * d), d, k,
    loss: softmaxObjective(F, T, split.train, theta, l2), heldOutLoss: best.held,
    iterations: res.iterations, split, reason: res.reason,
  };
}

/** Per-feature mean and standard deviation over `rows` (float64; a constant feature gets sd 1). */
export function moments(F: Features, rows: Int32Array): { mu: Float64Array; sd: Float64Array } {
  const { X, d } = F, mu = new Float64Array(d), sd = new Float64Array(d), m = Math.max(1, rows.length);
  for (const r of rows) for (let j = 0; j < d; j++) mu[j] += X[r * d + j];
  for (let j = 0; j < d; j++) mu[j] /= m;
  for (const r of rows) for (let j = 0; j < d; j++) { const t = X[r * d + j] - mu[j]; sd[j] += t * t; }
  for (let j = 0; j < d; j++) { sd[j] = Math.sqrt(sd[j] / m); if (!(sd[j] > 1e-12)) sd[j] = 1; }
  return { mu, sd };
}

/** Logits of a linear head for every row (float64 parameters as given). */
export function linearLogits(F: Features, W: ArrayLike<number>, b: ArrayLike<number>, k: number): Float64Array {
  const { X, n, d } = F, out = new Float64Array(n * k);
  for (let i = 0; i < n; i++) for (let c = 0; c < k; c++) {
    let z = b[c];
    for (let j = 0; j < d; j++) z += W[c * d + j] * X[i * d + j];
    out[i * k + c] = z;
  }
  return out;
}

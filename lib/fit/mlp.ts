// The small MLP head: features → Gemm(H) → Relu → Gemm(K). Same targets and loss
// as softmax regression, plus L2 on both weight matrices. Fitted with Adam
// (Kingma & Ba 2015) on seeded mini-batches over standardised features; the
// standardisation is folded back into the first layer, so the head reads raw features.
import { rowLoss } from './targets.js';
import { mulberry32 } from '../graph/build.js';
import { allRows, heldOutSplit, type Features, type Targets } from './targets.js';
import { moments } from './softmax.js';

export interface MlpParams { d: number; h: number; k: number; W1: Float64Array; b1: Float64Array; W2: Float64Array; b2: Float64Array }

const views = (theta: Float64Array, d: number, h: number, k: number) => {
  let o = 0;
  const take = (n: number) => theta.subarray(o, (o += n));
  return { W1: take(h * d), b1: take(h), W2: take(k * h), b2: take(k) };
};
export const mlpParamCount = (d: number, h: number, k: number) => h * d + h + k * h + k;

/** Objective over `rows` (mean loss + (l2/2)(‖W1‖² + ‖W2‖²)); exact gradient into `grad` when given. */
export function mlpObjective(F: Features, T: Targets, rows: ArrayLike<number>, theta: Float64Array, h: number, l2: number, grad?: Float64Array): number {
  const { X, d } = F, k = T.k, m = rows.length;
  const P = views(theta, d, h, k), G = grad ? views(grad, d, h, k) : undefined;
  const temp = T.kind === 'soft' ? T.temperature : 1;
  const a = new Float64Array(h), s = new Float64Array(k), e = new Float64Array(k), da = new Float64Array(h);
  if (grad) grad.fill(0);
  let total = 0;
  for (let ri = 0; ri < m; ri++) {
    const r = rows[ri], off = r * d;
    for (let u = 0; u < h; u++) {
      let z = P.b1[u];
      for (let j = 0; j < d; j++) z += P.W1[u * d + j] * X[off + j];
      a[u] = z > 0 ? z : 0;
    }
    for (let c = 0; c < k; c++) {
      let z = P.b2[c];
      for (let u = 0; u < h; u++) z += P.W2[c * h + u] * a[u];
      s[c] = z / temp;
    }
    total += rowLoss(s, e, k, T, r, temp);
    if (!G) continue;
    da.fill(0);
    for (let c = 0; c < k; c++) {
      const ec = e[c];
      G.b2[c] += ec;
      for (let u = 0; u < h; u++) { G.W2[c * h + u] += ec * a[u]; da[u] += ec * P.W2[c * h + u]; }
    }
    for (let u = 0; u < h; u++) {
      if (a[u] <= 0) continue; // Relu's gradient at 0 taken as 0
      const du = da[u];
      G.b1[u] += du;
      for (let j = 0; j < d; j++) G.W1[u * d + j] += du * X[off + j];
    }
  }
  let reg = 0;
  for (const W of [P.W1, P.W2]) for (let i = 0; i < W.length; i++) reg += W[i] * W[i];
  if (G) {
    for (let i = 0; i < grad!.length; i++) grad![i] /= m;
    for (const [W, gW] of [[P.W1, G.W1], [P.W2, G.W2]] as const) for (let i = 0; i < W.length; i++) gW[i] += l2 * W[i];
  }
  return total / m + 0.5 * l2 * reg;
}

export interface MlpFitOptions {
  l2?: number; seed?: number; heldOut?: number;
  /** epochs without a better held-out loss before stopping (default 10) */
  patience?: number;
  epochs?: number; batch?: number; lr?: number;
}

export interface MlpFit extends MlpParams { loss: number; heldOutLoss: number; epochs: number; split: { train: Int32Array; held: Int32Array } }

export function fitMlp(F: Features, T: Targets, hidden: number, o: MlpFitOptions = {}): MlpFit {
  const l2 = o.l2 ?? 1e-5, seed = o.seed ?? 1, patience = o.patience ?? 10, epochs = o.epochs ?? 200, bs = o.batch ?? 128, lr = o.lr ?? 3e-3;
  const { n, d } = F, k = T.k, h = hidden;
  const split = o.heldOut === 0 ? { train: allRows(n), held: new Int32Array(0) } : heldOutSplit(n, o.heldOut ?? 0.1, seed);
  const { mu, sd } = moments(F, split.train);
  const Z = new Float64Array(n * d);
  for (let i = 0; i < n; i++) for (let j = 0; j < d; j++) Z[i * d + j] = (F.X[i * d + j] - mu[j]) / sd[j];
  const S: Features = { X: Z, n, d };

  const rnd = mulberry32(seed ^ 0x6d6c70);
  const theta = new Float64Array(mlpParamCount(d, h, k));
  const P = views(theta, d, h, k);
  // He-uniform for the Relu layer, Glorot-uniform for the output layer (common practice).
  const lim1 = Math.sqrt(6 / d), lim2 = Math.sqrt(6 / (h + k));
  for (let i = 0; i < P.W1.length; i++) P.W1[i] = (2 * rnd() - 1) * lim1;
  for (let i = 0; i < P.W2.length; i++) P.W2[i] = (2 * rnd() - 1) * lim2;

  const mom = new Float64Array(theta.length), vel = new Float64Array(theta.length), g = new Float64Array(theta.length);
  const b1 = 0.9, b2 = 0.999, eps = 1e-8;
  const order = Int32Array.from(split.train);
  const heldLoss = () => (split.held.length ? mlpObjective(S, T, split.held, theta, h, 0) : mlpObjective(S, T, split.train, theta, h, l2));
  let best = { theta: Float64Array.from(theta), loss: heldLoss(), epoch: 0 };
  let step = 0, epoch = 0;
  for (epoch = 1; epoch <= epochs; epoch++) {
    for (let i = order.length - 1; i > 0; i--) { const j = Math.floor(rnd() * (i + 1)); const t = order[i]; order[i] = order[j]; order[j] = t; }
    for (let at = 0; at < order.length; at += bs) {
      mlpObjective(S, T, order.subarray(at, Math.min(order.length, at + bs)), theta, h, l2, g);
      step++;
      const c1 = 1 - b1 ** step, c2 = 1 - b2 ** step;
      for (let i = 0; i < theta.length; i++) {
        mom[i] = b1 * mom[i] + (1 - b1) * g[i];
        vel[i] = b2 * vel[i] + (1 - b2) * g[i] * g[i];
        theta[i] -= (lr * (mom[i] / c1)) / (Math.sqrt(vel[i] / c2) + eps);
      }
    }
    const hl = heldLoss();
    if (hl < best.loss) best = { theta: Float64Array.from(theta), loss: hl, epoch };
    else if (epoch - best.epoch >= patience) break;
  }
  theta.set(best.theta);
  const loss = mlpObjective(S, T, split.train, theta, h, l2);
  // Fold the standardisation: W1·((x − μ)/σ) + b1 = (W1/σ)·x + (b1 − (W1/σ)·μ).
  const W1 = new Float64Array(h * d), bias1 = Float64Array.from(P.b1);
  for (let u = 0; u < h; u++) for (let j = 0; j < d; j++) {
    W1[u * d + j] = P.W1[u * d + j] / sd[j];
    bias1[u] -= W1[u * d + j] * mu[j];
  }
  return {
    d, h, k, W1, b1: bias1, W2: Float64Array.from(P.W2), b2: Float64Array.from(P.b2),
    loss, heldOutLoss: split.held.length ? best.loss : NaN, epochs: Math.min(epoch, epochs), split,
  };
}

/** Logits of an MLP head for every row. */
export function mlpLogits(F: Features, p: { d: number; h: number; k: number; W1: ArrayLike<number>; b1: ArrayLike<number>; W2: ArrayLike<number>; b2: ArrayLike<number> }): Float64Array {
  const { X, n, d } = F, { h, k } = p, out = new Float64Array(n * k), a = new Float64Array(h);
  for (let i = 0; i < n; i++) {
    for (let u = 0; u < h; u++) {
      let z = p.b1[u];
      for (let j = 0; j < d; j++) z += p.W1[u * d + j] * X[i * d + j];
      a[u] = z > 0 ? z : 0;
    }
    for (let c = 0; c < k; c++) {
      let z = p.b2[c];
      for (let u = 0; u < h; u++) z += p.W2[c * h + u] * a[u];
      out[i * k + c] = z;
    }
  }
  return out;
}

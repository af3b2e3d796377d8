// Limited-memory BFGS (Nocedal & Wright, Numerical Optimization, Alg. 7.4/7.5) with a
// strong-Wolfe line search (Alg. 3.5/3.6, cubic interpolation). Float64 throughout:
// the heads are small, so exactness matters more than speed.

/** Writes the gradient at x into g and returns the objective at x. */
export type Objective = (x: Float64Array, g: Float64Array) => number;

export interface LbfgsOptions {
  /** correction pairs kept (default 10) */
  memory?: number;
  maxIter?: number;
  /** stop when max |g_i| ≤ gtol (default 1e-9) */
  gtol?: number;
  /** stop when the objective falls by less than ftol·max(1,|f|) (default 1e-13) */
  ftol?: number;
  /** called after each accepted step; returning true stops */
  onIter?: (iter: number, x: Float64Array, f: number) => boolean | void;
}

export interface LbfgsResult { x: Float64Array; f: number; iterations: number; evaluations: number; reason: 'gtol' | 'ftol' | 'maxIter' | 'stopped' | 'lineSearch' }

const dot = (a: Float64Array, b: Float64Array) => { let s = 0; for (let i = 0; i < a.length; i++) s += a[i] * b[i]; return s; };
const maxAbs = (a: Float64Array) => { let m = 0; for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i])); return m; };

interface Point { t: number; f: number; dg: number; g: Float64Array }

/** Minimiser of the cubic through two points with slopes, kept inside [lo, hi] away from the ends. */
function cubicMin(a: Point, b: Point, lo: number, hi: number): number {
  const d1 = a.dg + b.dg - (3 * (a.f - b.f)) / (a.t - b.t);
  const sq = d1 * d1 - a.dg * b.dg;
  const w = hi - lo;
  let t: number;
  if (sq >= 0) {
    const d2 = Math.sign(b.t - a.t) * Math.sqrt(sq);
    t = b.t - ((b.t - a.t) * (b.dg + d2 - d1)) / (b.dg - a.dg + 2 * d2);
  } else t = (lo + hi) / 2;
  if (!Number.isFinite(t)) t = (lo + hi) / 2;
  return Math.min(Math.max(t, lo + 0.1 * w), hi - 0.1 * w);
}

function strongWolfe(fun: Objective, x: Float64Array, f0: number, g0: Float64Array, d: Float64Array, t0: number, count: () => void,
  c1 = 1e-4, c2 = 0.9, maxLs = 30): Point | undefined {
  const n = x.length, xt = new Float64Array(n);
  const dg0 = dot(g0, d);
  const at = (t: number): Point => {
    for (let i = 0; i < n; i++) xt[i] = x[i] + t * d[i];
    const g = new Float64Array(n);
    count();
    const f = fun(xt, g);
    return { t, f, dg: dot(g, d), g };
  };
  const armijo = (p: Point) => p.f <= f0 + c1 * p.t * dg0;
  const curv = (p: Point) => Math.abs(p.dg) <= -c2 * dg0;
  const zoom = (lo: Point, hi: Point): Point | undefined => {
    for (let j = 0; j < maxLs; j++) {
      const a = Math.min(lo.t, hi.t), b = Math.max(lo.t, hi.t);
      if ((b - a) * maxAbs(d) < 1e-16 * (1 + maxAbs(x))) break;
      const p = at(cubicMin(lo, hi, a, b));
      if (!armijo(p) || p.f >= lo.f || !Number.isFinite(p.f)) hi = p;
      else {
        if (curv(p)) return p;
        if (p.dg * (hi.t - lo.t) >= 0) hi = lo;
        lo = p;
      }
    }
    return lo.t > 0 ? lo : undefined;
  };
  let prev: Point = { t: 0, f: f0, dg: dg0, g: g0 };
  let t = t0;
  for (let i = 0; i < maxLs; i++) {
    const p = at(t);
    if (!Number.isFinite(p.f) || !armijo(p) || (i > 0 && p.f >= prev.f)) return zoom(prev, p);
    if (curv(p)) return p;
    if (p.dg >= 0) return zoom(p, prev);
    prev = p;
    t *= 2;
  }
  return prev.t > 0 ? prev : undefined;
}

export function lbfgs(fun: Objective, x0: Float64Array, o: LbfgsOptions = {}): LbfgsResult {
  const m = o.memory ?? 10, maxIter = o.maxIter ?? 1000, gtol = o.gtol ?? 1e-9, ftol = o.ftol ?? 1e-13;
  const n = x0.length;
  let x: Float64Array = Float64Array.from(x0);
  let g: Float64Array = new Float64Array(n);
  let evaluations = 1;
  let f = fun(x, g);
  const S: Float64Array[] = [], Y: Float64Array[] = [], rho: number[] = [];
  const d = new Float64Array(n), alpha = new Float64Array(m);
  if (maxAbs(g) <= gtol) return { x, f, iterations: 0, evaluations, reason: 'gtol' };
  for (let iter = 1; iter <= maxIter; iter++) {
    // Two-loop recursion: d = −H·g, H the implicit inverse-Hessian estimate.
    for (let i = 0; i < n; i++) d[i] = -g[i];
    for (let j = S.length - 1; j >= 0; j--) {
      alpha[j] = rho[j] * dot(S[j], d);
      for (let i = 0; i < n; i++) d[i] -= alpha[j] * Y[j][i];
    }
    if (S.length) {
      const k = S.length - 1, gamma = dot(S[k], Y[k]) / dot(Y[k], Y[k]);
      for (let i = 0; i < n; i++) d[i] *= gamma;
    }
    for (let j = 0; j < S.length; j++) {
      const beta = rho[j] * dot(Y[j], d);
      for (let i = 0; i < n; i++) d[i] += (alpha[j] - beta) * S[j][i];
    }
    if (dot(d, g) >= 0) { // not a descent direction: forget the curvature pairs
      S.length = Y.length = rho.length = 0;
      for (let i = 0; i < n; i++) d[i] = -g[i];
    }
    const t0 = iter === 1 && !S.length ? Math.min(1, 1 / maxAbs(g)) : 1;
    const p = strongWolfe(fun, x, f, g, d, t0, () => evaluations++);
    if (!p) return { x, f, iterations: iter - 1, evaluations, reason: 'lineSearch' };
    const xn = new Float64Array(n), s = new Float64Array(n), y = new Float64Array(n);
    for (let i = 0; i < n; i++) { xn[i] = x[i] + p.t * d[i]; s[i] = xn[i] - x[i]; y[i] = p.g[i] - g[i]; }
    const sy = dot(s, y);
    if (sy > 1e-12 * Math.sqrt(dot(s, s) * dot(y, y))) {
      if (S.length === m) { S.shift(); Y.shift(); rho.shift(); }
      S.push(s); Y.push(y); rho.push(1 / sy);
    }
    const fPrev = f;
    x = xn; g = p.g; f = p.f;
    if (o.onIter?.(iter, x, f)) return { x, f, iterations: iter, evaluations, reason: 'stopped' };
    if (maxAbs(g) <= gtol) return { x, f, iterations: iter, evaluations, reason: 'gtol' };
    if (fPrev - f <= ftol * Math.max(1, Math.abs(f))) return { x, f, iterations: iter, evaluations, reason: 'ftol' };
  }
  return { x, f, iterations: maxIter, evaluations, reason: 'maxIter' };
}

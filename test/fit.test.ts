// Softmax regression and the MLP head: a reference fit, gradients, distillation.
import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import { readNpy, toFloat32 } from '../lib/data/npy.js';
import { softmaxObjective, fitSoftmax, linearLogits, paramCount } from '../lib/fit/softmax.js';
import { mlpObjective, fitMlp, mlpLogits, mlpParamCount } from '../lib/fit/mlp.js';
import { allRows, argmaxRows, labelTargets, matchRate, softTargets, type Features, type Targets } from '../lib/fit/targets.js';
import { mulberry32 } from '../lib/graph/build.js';

const FIX = 'test/fixtures/logreg';

describe('softmax regression against a reference fit', () => {
  // Reference: scikit-learn 1.2.1 LogisticRegression (multinomial, lbfgs, C = 1/(l2·N)),
  // made by scripts/make-logreg-reference.py with Debian's python3-sklearn.
  const ref = JSON.parse(fs.readFileSync(`${FIX}/reference.json`, 'utf8'));
  const X = toFloat32(readNpy(`${FIX}/X.npy`).data);
  const y = Array.from(readNpy(`${FIX}/y.npy`).data as BigInt64Array, Number);
  const F: Features = { X, n: ref.n, d: ref.d };
  const T = labelTargets(y, ref.k);

  it('reaches the reference objective and accuracy', () => {
    const fit = fitSoftmax(F, T, { l2: ref.l2, heldOut: 0 });
    const acc = matchRate(argmaxRows(linearLogits(F, fit.W, fit.b, ref.k), F.n, ref.k), y, allRows(F.n));
    console.log(`objective ours ${fit.loss.toPrecision(12)} reference ${ref.objective.toPrecision(12)} (rel ${((fit.loss - ref.objective) / ref.objective).toExponential(2)}); accuracy ${acc} vs ${ref.accuracy}; ${fit.iterations} iterations`);
    expect(Math.abs(fit.loss - ref.objective) / ref.objective).toBeLessThan(1e-4);
    expect(fit.loss).toBeLessThanOrEqual(ref.objective * (1 + 1e-9));
    expect(acc).toBe(ref.accuracy);
  });

  it('agrees on the objective at the reference solution (same L2 mapping)', () => {
    const theta = new Float64Array([...ref.coef.flat(), ...ref.intercept]);
    const g = new Float64Array(theta.length);
    const f = softmaxObjective(F, T, allRows(F.n), theta, ref.l2, g);
    expect(Math.abs(f - ref.objective) / ref.objective).toBeLessThan(1e-10);
    // The reference is a stationary point of our objective too: the mapping C = 1/(l2·N) holds.
    expect(Math.max(...g.map(Math.abs))).toBeLessThan(1e-5);
  });
});

/** Central differences, step 1e-6 (standard gradient checking). */
function checkGradient(f: (t: Float64Array, g?: Float64Array) => number, theta: Float64Array): number {
  const g = new Float64Array(theta.length);
  f(theta, g);
  let worst = 0;
  for (let i = 0; i < theta.length; i++) {
    const e = 1e-6, t = Float64Array.from(theta);
    t[i] += e; const fp = f(t);
    t[i] -= 2 * e; const fm = f(t);
    const num = (fp - fm) / (2 * e);
    worst = Math.max(worst, Math.abs(num - g[i]) / Math.max(1e-3, Math.abs(num) + Math.abs(g[i])));
  }
  return worst;
}

function synthetic(n: number, d: number, k: number, seed: number): { F: Features; teacher: Float64Array } {
  const rnd = mulberry32(seed), gauss = () => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const X = Float32Array.from({ length: n * d }, gauss);
  const Wt = Float64Array.from({ length: k * d }, () => 2 * gauss());
  const bt = Float64Array.from({ length: k }, gauss);
  return { F: { X, n, d }, teacher: linearLogits({ X, n, d }, Wt, bt, k) };
}

describe('exact gradients (checked against central finite differences)', () => {
  const { F, teacher } = synthetic(40, 5, 3, 7);
  const rows = allRows(F.n);
  const targets: [string, Targets][] = [
    ['labels', labelTargets(argmaxRows(teacher, F.n, 3), 3)],
    ['soft, T = 2.5', softTargets(teacher, F.n, 3, 2.5)],
  ];
  const rnd = mulberry32(3);
  for (const [name, T] of targets) {
    it(`softmax regression, ${name}`, () => {
      const theta = Float64Array.from({ length: paramCount(5, 3) }, () => rnd() - 0.5);
      expect(checkGradient((t, g) => softmaxObjective(F, T, rows, t, 0.1, g), theta)).toBeLessThan(1e-6);
    });
    it(`MLP, ${name}`, () => {
      const theta = Float64Array.from({ length: mlpParamCount(5, 6, 3) }, () => rnd() - 0.5);
      expect(checkGradient((t, g) => mlpObjective(F, T, rows, t, 6, 0.1, g), theta)).toBeLessThan(1e-5);
    });
  }
});

describe('distillation (KL to the teacher softmax at a temperature)', () => {
  it('recovers the argmax of a linear teacher without labels', () => {
    const { F, teacher } = synthetic(600, 6, 4, 11);
    const fit = fitSoftmax(F, softTargets(teacher, F.n, 4, 2), { l2: 1e-5, seed: 5 });
    const agree = matchRate(argmaxRows(linearLogits(F, fit.W, fit.b, 4), F.n, 4), argmaxRows(teacher, F.n, 4), allRows(F.n));
    console.log(`linear distillation agreement ${agree}`);
    expect(agree).toBeGreaterThan(0.97);
  });

  it('the MLP head distils a nonlinear teacher', () => {
    const { F } = synthetic(800, 4, 3, 13);
    // Teacher: class by the quadrant-ish sign pattern of x0·x1 and x2, not linearly separable.
    const z = new Float64Array(F.n * 3);
    for (let i = 0; i < F.n; i++) { const x = F.X.subarray(i * 4); z[i * 3] = 4 * x[0] * x[1]; z[i * 3 + 1] = 3 * x[2]; z[i * 3 + 2] = 1; }
    const fit = fitMlp(F, softTargets(z, F.n, 3, 1), 16, { l2: 1e-5, seed: 2, epochs: 150 });
    const agree = matchRate(argmaxRows(mlpLogits(F, fit), F.n, 3), argmaxRows(z, F.n, 3), fit.split.held);
    console.log(`MLP distillation held-out agreement ${agree} after ${fit.epochs} epochs`);
    expect(agree).toBeGreaterThan(0.85);
  });

  it('is deterministic for a seed', () => {
    const { F, teacher } = synthetic(200, 4, 3, 17);
    const T = softTargets(teacher, F.n, 3, 1);
    const a = fitMlp(F, T, 8, { seed: 9, epochs: 20 }), b = fitMlp(F, T, 8, { seed: 9, epochs: 20 });
    expect(Buffer.from(a.W1.buffer).equals(Buffer.from(b.W1.buffer))).toBe(true);
    const c = fitSoftmax(F, T, { seed: 9 }), e = fitSoftmax(F, T, { seed: 9 });
    expect(Buffer.from(c.W.buffer).equals(Buffer.from(e.W.buffer))).toBe(true);
  });
});

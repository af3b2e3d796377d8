#!/usr/bin/python3
# Reference for offramp's softmax regression (test/fit.test.ts): scikit-learn's
# LogisticRegression (Debian python3-sklearn; multinomial, lbfgs) on a fixed,
# seeded feature set. Run once with Debian's /usr/bin/python3; the outputs are
# committed, so the tests never need python.
#
# L2 mapping: scikit-learn minimises C·Σ_i CE_i + ½‖W‖² (intercept unpenalised);
# offramp minimises (1/N)·Σ_i CE_i + (l2/2)·‖W‖². Dividing the first by C·N gives
# the second with l2 = 1/(C·N), so C = 1/(l2·N). The objective recorded here is
# offramp's form, evaluated at scikit-learn's solution.
import json, os, sys
import numpy as np
import sklearn
from sklearn.linear_model import LogisticRegression

SEED, N, D, K, L2 = 20240607, 300, 8, 4, 1e-2
out = os.path.join(os.path.dirname(os.path.abspath(__file__)), '..', 'test', 'fixtures', 'logreg')

rng = np.random.default_rng(SEED)
centres = rng.normal(0.0, 0.8, size=(K, D))
y = rng.integers(0, K, size=N)
X = (centres[y] + rng.normal(0.0, 1.0, size=(N, D)) * rng.uniform(0.5, 2.0, size=D)).astype(np.float32)
y = y.astype(np.int64)

C = 1.0 / (L2 * N)
clf = LogisticRegression(multi_class='multinomial', solver='lbfgs', C=C, tol=1e-12, max_iter=100000)
clf.fit(X.astype(np.float64), y)
W, b = clf.coef_, clf.intercept_

def objective(W, b):
    Z = X.astype(np.float64) @ W.T + b
    Z -= Z.max(axis=1, keepdims=True)
    lse = np.log(np.exp(Z).sum(axis=1))
    ce = lse - Z[np.arange(N), y]
    return float(ce.mean() + 0.5 * L2 * (W ** 2).sum())

os.makedirs(out, exist_ok=True)
np.save(os.path.join(out, 'X.npy'), X)
np.save(os.path.join(out, 'y.npy'), y)
ref = {
    'source': 'scikit-learn %s LogisticRegression(multi_class=multinomial, solver=lbfgs, tol=1e-12), numpy %s' % (sklearn.__version__, np.__version__),
    'seed': SEED, 'n': N, 'd': D, 'k': K, 'l2': L2, 'C': C,
    'objective': objective(W, b),
    'accuracy': float((clf.predict(X.astype(np.float64)) == y).mean()),
    'iterations': int(clf.n_iter_[0]),
    'coef': W.tolist(), 'intercept': b.tolist(),
}
with open(os.path.join(out, 'reference.json'), 'w') as f:
    json.dump(ref, f, indent=1)
    f.write('\n')
print('objective %.12f accuracy %.4f iterations %d' % (ref['objective'], ref['accuracy'], ref['iterations']), file=sys.stderr)

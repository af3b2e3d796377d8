# Reference values for lib/certify/mean.ts, computed independently with NumPy (Debian python3-numpy):
# - the empirical Bernstein bound of Maurer & Pontil 2009, Theorem 4, in closed form:
#     mean + sqrt(2 V ln(2/δ) / n) + 7 ln(2/δ) / (3 (n − 1)),  V the sample variance (ddof = 1), values in [0, 1];
# - the one-sided betting bound of Waudby-Smith & Ramdas 2023 with their predictable plug-in bets (fixed-n form,
#   ln(1/δ) for one side), truncated at c/(1 − m), c = 3/4: the least m on a grid of step 1e-6 whose capital
#   max_t prod_{i<=t} (1 + λ_i(m)(m − x_i)) reaches 1/δ, evaluated for the whole grid at once (no bisection).
# Run once with /usr/bin/python3; the output is committed as test/fixtures/certify/mean-reference.json.
import json, sys
import numpy as np

C = 0.75

def bernstein(x, delta):
    n = len(x)
    l = np.log(2 / delta)
    return min(1.0, float(x.mean() + np.sqrt(2 * x.var(ddof=1) * l / n) + 7 * l / (3 * (n - 1))))

def bets(x, delta):
    n = len(x)
    mu = (0.5 + np.cumsum(x)) / (np.arange(1, n + 1) + 1)          # μ̂_t, t = 1..n
    s2 = (0.25 + np.cumsum((x - mu) ** 2)) / (np.arange(1, n + 1) + 1)  # σ̂²_t
    prev = np.concatenate([[0.25], s2[:-1]])                          # σ̂²_{t−1}, σ̂²_0 = 1/4
    return np.sqrt(2 * np.log(1 / delta) / (n * prev))

def betting(x, delta):
    lam = bets(x, delta)
    best = None
    # coarse grid, then a fine one just below the first rejected coarse point
    for step, lo, hi in [(1e-3, 0.0, 1.0), (1e-6, None, None)]:
        if lo is None:
            if best is None:
                return 1.0
            lo, hi = max(0.0, best - 1e-3), best
        m = np.arange(lo, hi + step / 2, step)
        m = m[m < 1]
        cap = C / (1 - m)
        fac = 1 + np.minimum(lam[:, None], cap[None, :]) * (m[None, :] - x[:, None])
        logk = np.cumsum(np.log(fac), axis=0).max(axis=0)
        hit = np.nonzero(logk >= np.log(1 / delta))[0]
        if len(hit) == 0:
            return 1.0
        best = float(m[hit[0]])
    return best

rng = np.random.default_rng(20)
cases = []
for n, kind in [(30, 'rare'), (120, 'rare'), (460, 'rare'), (460, 'spread'), (200, 'uniform'), (50, 'zeros'), (1000, 'rare')]:
    if kind == 'rare':      # most values at 1/2 (a net share of 0 on [−1, 1]), some above, a few below
        x = 0.5 + np.where(rng.random(n) < 0.15, 0.2 * rng.random(n), 0) - np.where(rng.random(n) < 0.05, 0.1 * rng.random(n), 0)
    elif kind == 'spread':
        x = np.clip(0.5 + 0.04 * rng.standard_normal(n), 0, 1)
    elif kind == 'uniform':
        x = rng.random(n)
    else:
        x = np.zeros(n)
    for delta in [0.05, 0.1, 0.01]:
        cases.append({"values": [float(v) for v in x], "delta": delta, "bernstein": bernstein(x, delta), "betting": betting(x, delta)})
json.dump({"source": f"numpy {np.__version__}: closed form (Maurer & Pontil 2009, Thm 4); betting capital on a grid of 1e-6 (Waudby-Smith & Ramdas 2023), c = {C}",
           "cases": cases}, sys.stdout)
print()

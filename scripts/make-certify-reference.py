# Reference values for lib/certify: Clopper–Pearson limits as beta quantiles,
# binomial CDFs and regularized incomplete betas, from SciPy (Debian python3-scipy).
# Run once with /usr/bin/python3; the output is committed as test/fixtures/certify/reference.json.
import json, sys
import scipy
from scipy.stats import beta, binom
from scipy.special import betainc

cases = []
for n in [1, 5, 20, 32, 100, 400, 1000, 2500, 5000, 20000]:
    for k in sorted({0, 1, 2, 3, n // 50, n // 10, n // 2, n - 1, n}):
        if k < 0 or k > n:
            continue
        for delta in [0.01, 0.05, 0.1, 0.025]:
            up = 1.0 if k == n else float(beta.ppf(1 - delta, k + 1, n - k))
            lo = 0.0 if k == 0 else float(beta.ppf(delta, k, n - k + 1))
            cases.append({"k": k, "n": n, "delta": delta, "upper": up, "lower": lo})
cdf = []
for n, k, p in [(10, 0, 0.1), (10, 3, 0.25), (100, 5, 0.02), (400, 12, 0.05), (5000, 40, 0.01), (20000, 250, 0.0125), (1000, 999, 0.999)]:
    cdf.append({"n": n, "k": k, "p": p, "cdf": float(binom.cdf(k, n, p))})
ib = []
for x, a, b in [(0.3, 2.0, 5.0), (0.01, 1.0, 400.0), (0.9, 50.0, 3.0), (0.5, 0.5, 0.5), (0.002, 11.0, 4990.0)]:
    ib.append({"x": x, "a": a, "b": b, "value": float(betainc(a, b, x))})
json.dump({"source": f"scipy {scipy.__version__}: scipy.stats.beta.ppf, scipy.stats.binom.cdf, scipy.special.betainc",
           "clopperPearson": cases, "binomialCdf": cdf, "incompleteBeta": ib}, sys.stdout, indent=1)
print()

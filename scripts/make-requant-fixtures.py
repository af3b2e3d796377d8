#!/usr/bin/python3
# Fixed-point requantization reference values, written from the formulas of Jacob et al. 2018
# ("Quantization and Training of Neural Networks for Efficient Integer-Arithmetic-Only Inference",
# section 2.2 and its appendix: M = 2^-n * M0 with M0 in [0.5, 1) as a Q31 integer; a rounding doubling
# high multiply; a rounding right shift by n) with NumPy's frexp and exact Python integers, apart from
# lib/kernels/requant.ts and offramp_requant.h. offramp's choices where the paper leaves one open: the
# high multiply rounds ties up (floor((a*b + 2^30) / 2^31)), the shift rounds ties away from zero,
# multipliers >= 1 shift left first (saturating to int32), multipliers below 2^-32 are 0.
# Debian packages: python3-numpy. Run from the repo root: /usr/bin/python3 scripts/make-requant-fixtures.py
import json, os
import numpy as np

OUT = 'test/fixtures/requant/cases.json'
rng = np.random.default_rng(20261204)
I32_MIN, I32_MAX = -2**31, 2**31 - 1

def quantize_multiplier(real):
    if real == 0:
        return 0, 0
    m, e = np.frexp(np.float64(real))        # real = m * 2^e, m in [0.5, 1)
    q = int(np.floor(float(m) * 2**31 + 0.5)) # nearest, ties up (exact: below 2^31 a double steps by 2^-22)
    if q == 2**31:
        q, e = 2**30, e + 1
    shift = -int(e)
    if shift > 31:
        return 0, 0
    assert shift >= -31
    return q, shift

def high_mul(a, b):
    if a == I32_MIN and b == I32_MIN:
        return I32_MAX
    return (a * b + 2**30) >> 31              # Python's >> floors: exact

def round_shift(x, e):
    if e <= 0:
        return x
    q, r = x >> e, x & ((1 << e) - 1)         # floor quotient, remainder in [0, 2^e)
    half = 1 << (e - 1)
    return q + 1 if (r > half or (r == half and x >= 0)) else q

def requantize(acc, mult, shift):
    if mult == 0:
        return 0
    if shift < 0:
        v = max(I32_MIN, min(I32_MAX, acc * 2**(-shift)))
        return high_mul(v, mult)
    return round_shift(high_mul(acc, mult), shift)

cases = {'multipliers': [], 'requantize': []}
reals = [1.0, 0.5, (2**31 - 0.5) / 2**31, 0.5 + 2**-33 + 2**-34, 0.75, 2**-31, 2**-32, 2**-33, 1.5, 3.0, 1 - 2**-40, 0.5 + 2**-33, 2**20, 1e-3, 0.0123456789]
reals += list(np.float64(np.float32(rng.uniform(1e-6, 1e-1, 200))))
reals += list(10.0 ** rng.uniform(-9, 3, 200))
for r in reals:
    m, s = quantize_multiplier(float(r))
    cases['multipliers'].append({'real': float(r), 'mult': m, 'shift': s})
accs = [0, 1, -1, 2, -2, I32_MAX, I32_MIN, I32_MIN + 1, 12345, -12345, 2**30, -2**30]
accs += [int(v) for v in rng.integers(-2**31, 2**31, 300)]
accs += [int(v) for v in rng.integers(-5000, 5000, 300)]
for i, acc in enumerate(accs):
    c = cases['multipliers'][i % len(cases['multipliers'])]
    cases['requantize'].append({'acc': acc, 'mult': c['mult'], 'shift': c['shift'], 'y': requantize(acc, c['mult'], c['shift'])})
# ties: accumulators that land exactly on half a step, both signs
for e in [1, 2, 5, 9, 17, 31]:
    for acc in [a for a in [3, -3, 5, -5, 2**e + 2**(e - 1), -(2**e + 2**(e - 1))] if I32_MIN <= a <= I32_MAX]:
        cases['requantize'].append({'acc': acc, 'mult': 2**30, 'shift': e - 1, 'y': requantize(acc, 2**30, e - 1)})
for a, b in [(I32_MIN, I32_MIN), (I32_MIN, I32_MAX), (I32_MAX, I32_MAX), (-1, 2**30), (1, 2**30), (-3, 2**30)]:
    cases.setdefault('highMul', []).append({'a': a, 'b': b, 'y': high_mul(a, b)})
for x in [int(v) for v in rng.integers(-2**31, 2**31, 100)] + [-7, 7, -6, 6, -5, 5, -1, 1]:
    for e in [0, 1, 2, 3, 8, 15, 30, 31]:
        cases.setdefault('roundShift', []).append({'x': x, 'e': e, 'y': round_shift(x, e)})
os.makedirs(os.path.dirname(OUT), exist_ok=True)
with open(OUT, 'w') as f:
    json.dump(cases, f, indent=0)
print(OUT, {k: len(v) for k, v in cases.items()})

#!/usr/bin/python3
# Fixed-point requantization reference values, written from the formulas of Jacob et al. 2018
# ("Quantization and Training of Neural Networks for Efficient Integer-Arithmetic-Only Inference",
# section 2.2: M = 2^-n * M0 with M0 in [0.5, 1) as a Q31 integer) with NumPy's frexp and exact Python
# integers, apart from lib/kernels/requant.ts and offramp_requant.h. offramp's choices where the paper
# leaves one open: the product acc * M0 is rounded once by the shift of 31 + n bits, to nearest with ties
# to even (ONNX QuantizeLinear's rounding), saturated to int32; multipliers below 2^-32 are 0, from 2^16
# up refused.
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
    if shift < -15:
        return None, None                     # refused: 2^16 or more
    return q, shift

def requantize(acc, mult, shift):
    if mult == 0:
        return 0
    e = 31 + shift
    p = acc * mult                            # exact
    q, r = p >> e, p & ((1 << e) - 1)         # floor quotient, remainder in [0, 2^e)
    half = 1 << (e - 1)
    if r > half or (r == half and q % 2 == 1):
        q += 1
    return max(I32_MIN, min(I32_MAX, q))

cases = {'multipliers': [], 'requantize': []}
reals = [2.0**15, 2.0**16, 40000.0, 1.0, 0.5, (2**31 - 0.5) / 2**31, 0.5 + 2**-33 + 2**-34, 0.75, 2**-31, 2**-32, 2**-33, 1.5, 3.0, 1 - 2**-40, 0.5 + 2**-33, 2**20, 1e-3, 0.0123456789]
reals += list(np.float64(np.float32(rng.uniform(1e-6, 1e-1, 200))))
reals += list(10.0 ** rng.uniform(-9, 3, 200))
cases['refused'] = []
for r in reals:
    m, s = quantize_multiplier(float(r))
    if m is None:
        cases['refused'].append(float(r))
    else:
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
        cases['requantize'].append({'acc': acc, 'mult': 2**30, 'shift': e - 16, 'y': requantize(acc, 2**30, e - 16)})
os.makedirs(os.path.dirname(OUT), exist_ok=True)
with open(OUT, 'w') as f:
    json.dump(cases, f, indent=0)
print(OUT, {k: len(v) for k, v in cases.items()})

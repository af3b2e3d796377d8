#!/usr/bin/python3
# QuantizeLinear / DequantizeLinear reference values, written from the ONNX operator definitions
# (Operators.md, opset 13: y = saturate(round(x / y_scale) + y_zero_point), rounding half to even;
# y = (x - x_zero_point) * x_scale; per-axis scales along `axis`) with NumPy alone, so that the checks
# of lib/quant/linear.ts and of onnxruntime's QDQ kernels compare with something written apart from both.
# Debian packages: python3-numpy. Run from the repo root: /usr/bin/python3 scripts/make-qdq-fixtures.py
import json, os
import numpy as np

OUT = 'test/fixtures/qdq/cases.json'
rng = np.random.default_rng(20261202)

def bcast(p, shape, axis):
    # Per-axis: the 1-D parameter reshaped to broadcast along `axis` (the definition's "slices along axis").
    if axis is None:
        return p.reshape(())
    s = [1] * len(shape)
    s[axis] = shape[axis]
    return p.reshape(s)

def quantize(x, scale, zp, axis, lo, hi):
    q = np.rint(x / bcast(scale, x.shape, axis)).astype(np.float64)  # float32 division, then half-to-even
    return np.clip(q + bcast(zp, x.shape, axis).astype(np.float64), lo, hi).astype(np.int64)

def dequantize(q, scale, zp, axis):
    d = (q.astype(np.int64) - bcast(zp, q.shape, axis).astype(np.int64)).astype(np.float32)
    return (d * bcast(scale, q.shape, axis)).astype(np.float32)

def case(name, x, scale, zp, axis, lo=-128, hi=127):
    x = x.astype(np.float32); scale = np.asarray(scale, np.float32).reshape(-1); zp = np.asarray(zp, np.int64).reshape(-1)
    q = quantize(x, scale, zp, axis, lo, hi)
    return {
        'name': name, 'dims': list(x.shape), 'axis': axis, 'lo': lo, 'hi': hi,
        # float32 values written as their exact decimal expansion of the float32 (repr of float64 of it)
        'x': [float(v) for v in x.reshape(-1)], 'scale': [float(v) for v in scale], 'zeroPoint': [int(v) for v in zp],
        'q': [int(v) for v in q.reshape(-1)], 'dq': [float(v) for v in dequantize(q, scale, zp, axis).reshape(-1)],
    }

cases = []
# Ties: x / scale lands exactly on k + 0.5 (scale a power of two), both signs: half to even, not away from zero.
ties = np.array([k + 0.5 for k in range(-6, 6)] + [0.0, -0.0, 1.25, -1.75], np.float32)
cases.append(case('ties, scale 0.5 (x/scale = k + 0.5 exactly)', ties * 0.5, [0.5], [0], None))
cases.append(case('ties with zero point 3', ties * 0.25, [0.25], [3], None))
# Saturation at both ends of int8, with a negative zero point.
cases.append(case('saturation', np.array([-1000, -130.4, -129, -128.6, 126.5, 127.49, 300, 1e9], np.float32), [1.0], [-5], None))
# Random per tensor.
cases.append(case('random per tensor', rng.normal(0, 3, 64), [0.0371], [-17], None))
# Per axis: [2, 3, 4] along axis 1 and axis 0, with zero points per slice.
x = rng.normal(0, 2, (2, 3, 4))
cases.append(case('per axis 1 of [2,3,4]', x, [0.011, 0.05, 0.2], [0, -20, 7], 1))
cases.append(case('per axis 0 of [2,3,4]', x, [0.013, 0.031], [1, -1], 0))
# Weights as offramp stores them: symmetric, range [-127, 127], per output channel of a conv kernel.
w = rng.normal(0, 0.2, (4, 2, 3, 3)).astype(np.float32)
wscale = (np.abs(w).reshape(4, -1).max(axis=1) / np.float32(127)).astype(np.float32)
cases.append(case('conv weight per output channel, symmetric', w, wscale, [0, 0, 0, 0], 0, -127, 127))
# An int32 bias at scale s_x * s_w per channel.
cases.append(case('int32 bias per channel', rng.normal(0, 0.5, 4), (np.float32(0.02) * wscale).astype(np.float32), [0, 0, 0, 0], 0, -2**31, 2**31 - 1))

# Calibration: the tails NumPy's percentile cuts from a skewed sample (a Relu-like activation: half zeros, a long right tail).
sample = np.maximum(rng.standard_t(3, 3000), 0).astype(np.float32) * np.float32(0.7)
percentile = {
    'p': 99.9, 'x': [float(v) for v in sample],
    'lo': float(np.percentile(sample.astype(np.float64), 0.1)), 'hi': float(np.percentile(sample.astype(np.float64), 99.9)),
    'min': float(sample.min()), 'max': float(sample.max()),
}

os.makedirs(os.path.dirname(OUT), exist_ok=True)
with open(OUT, 'w') as f:
    json.dump({'source': 'scripts/make-qdq-fixtures.py (NumPy %s), ONNX QuantizeLinear/DequantizeLinear definitions' % np.__version__, 'cases': cases, 'percentile': percentile}, f, indent=1)
    f.write('\n')
print(OUT, len(cases), 'cases')

// QuantizeLinear / DequantizeLinear semantics (round half to even, saturation, per-axis scales) against
// an independent NumPy implementation of the ONNX operator definitions (test/fixtures/qdq/cases.json,
// made by scripts/make-qdq-fixtures.py), and onnxruntime running the same operators from a QDQ file.
import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import { activationParams, dequantize, quantize, roundHalfEven, type QuantParams } from '../lib/quant/linear.js';
import { chooseRange, Histogram, HISTOGRAM_BINS, RangeObserver } from '../lib/quant/calibrate.js';
import { modelBuilder } from '../lib/graph/build.js';
import { modelToProto } from '../lib/graph/ir.js';
import { encodeModel } from '../lib/onnx/codec.js';
import { FLOAT, INT8, INT32 } from '../lib/onnx/dtype.js';
import { openSession, runSession, tensorFromData } from '../lib/runtime/ort.js';

interface Case { name: string; dims: number[]; axis: number | null; lo: number; hi: number; x: number[]; scale: number[]; zeroPoint: number[]; q: number[]; dq: number[] }
const { cases } = JSON.parse(fs.readFileSync('test/fixtures/qdq/cases.json', 'utf8')) as { cases: Case[] };
const params = (c: Case): QuantParams => ({ scale: Float32Array.from(c.scale), zeroPoint: Int32Array.from(c.zeroPoint), axis: c.axis ?? undefined, lo: c.lo, hi: c.hi });

describe('QuantizeLinear / DequantizeLinear against NumPy (ONNX operator definitions)', () => {
  it('rounds half to even (IEEE 754 roundTiesToEven, as the spec says)', () => {
    expect([-2.5, -1.5, -0.5, 0.5, 1.5, 2.5, 3.5, 2.4999, -2.5001].map(roundHalfEven)).toEqual([-2, -2, -0, 0, 2, 2, 4, 2, -3]);
  });
  for (const c of cases) it(c.name, () => {
    const p = params(c);
    const q = quantize(c.x, c.dims, p);
    expect(Array.from(q)).toEqual(c.q);
    expect(Array.from(dequantize(q, c.dims, p))).toEqual(c.dq);
  });
  it('the fixtures hit ties and both saturation ends', () => {
    const sat = cases.find((c) => c.name === 'saturation')!;
    expect(sat.q).toContain(-128);
    expect(sat.q).toContain(127);
  });
});

describe('onnxruntime runs the same QDQ operators (opset 13, per tensor and per axis)', () => {
  for (const c of cases) it(c.name, async () => {
    const int32 = c.lo < -128;
    const b = modelBuilder({ opset: 13 });
    const scale = b.init('scale', FLOAT, c.axis === null ? [] : [c.scale.length], Float32Array.from(c.scale));
    const attrs = c.axis === null ? {} : { axis: c.axis };
    let q: string, x: string, zp: string | undefined;
    if (int32) {
      // QuantizeLinear has no int32 output; the bias path is DequantizeLinear of stored int32 values.
      x = b.input('q', INT32, c.dims);
      q = x;
    } else {
      x = b.input('x', FLOAT, c.dims);
      zp = b.init('zp', INT8, c.axis === null ? [] : [c.zeroPoint.length], Int8Array.from(c.zeroPoint));
      q = b.node('QuantizeLinear', [x, scale, zp], attrs, { outputs: ['q'] })[0];
      b.output(q, INT8, c.dims);
    }
    const dq = b.node('DequantizeLinear', zp ? [q, scale, zp] : [q, scale], attrs, { outputs: ['dq'] })[0];
    b.output(dq, FLOAT, c.dims);
    const s = await openSession(encodeModel(modelToProto(b.build())));
    try {
      const feed = int32 ? tensorFromData(INT32, c.dims, Int32Array.from(c.q)) : tensorFromData(FLOAT, c.dims, Float32Array.from(c.x));
      const out = await runSession(s, { [x]: feed });
      if (!int32) expect(Array.from(out.q.data as Int8Array)).toEqual(c.q);
      expect(Array.from(out.dq.data as Float32Array)).toEqual(c.dq);
    } finally { await s.release(); }
  });
});

describe('activation parameters', () => {
  it('asymmetric int8 over a range holding 0: both ends map inside [-128, 127] and 0 is exact', () => {
    // scale = (hi - lo) / 255, zero point = round(-128 - lo / scale) (common practice for asymmetric int8).
    for (const [lo, hi] of [[-1, 3], [0, 6], [-4, -1], [0.5, 2], [-3.2, 0]] as const) {
      const { scale, zeroPoint } = activationParams(lo, hi);
      const p: QuantParams = { scale: Float32Array.of(scale), zeroPoint: Int32Array.of(zeroPoint), lo: -128, hi: 127 };
      const [a, bq, z] = quantize([Math.min(lo, 0), Math.max(hi, 0), 0], [3], p);
      expect(a).toBeGreaterThanOrEqual(-128);
      expect(a).toBeLessThanOrEqual(-127);
      expect(bq).toBeGreaterThanOrEqual(126);
      expect(z).toBe(zeroPoint);
      expect(dequantize([z], [1], p)[0]).toBe(0);
    }
  });
});

describe('calibration ranges', () => {
  const { percentile: pc } = JSON.parse(fs.readFileSync('test/fixtures/qdq/cases.json', 'utf8')) as { percentile: { p: number; x: number[]; lo: number; hi: number; min: number; max: number } };
  const r = new RangeObserver(); r.add(pc.x);
  const h = new Histogram(r.min, r.max); h.add(pc.x);
  const bin = (r.max - r.min) / HISTOGRAM_BINS;
  it('min/max and the percentile tails as NumPy cuts them (np.percentile, within one histogram bin)', () => {
    expect([r.min, r.max]).toEqual([pc.min, pc.max]);
    const [lo, hi] = chooseRange('percentile', r, h, pc.p);
    expect(Math.abs(lo - pc.lo)).toBeLessThanOrEqual(bin);
    expect(Math.abs(hi - pc.hi)).toBeLessThanOrEqual(bin);
    expect(hi).toBeLessThan(pc.max);
  });
  it('mse: the range it picks from the histogram is within 1 % of the best of its grid on the sample itself', () => {
    // The expected squared error of quantize-dequantize, over the exact sample (not the histogram's bin centres).
    const err = ([lo, hi]: [number, number]) => {
      const { scale, zeroPoint } = activationParams(lo, hi);
      const p: QuantParams = { scale: Float32Array.of(scale), zeroPoint: Int32Array.of(zeroPoint), lo: -128, hi: 127 };
      const d = dequantize(quantize(pc.x, [pc.x.length], p), [pc.x.length], p);
      return pc.x.reduce((a, x, i) => a + (d[i] - x) ** 2, 0);
    };
    const grid = Array.from({ length: 57 }, (_, k) => err([0, r.max * (1 - k / 64)]));
    expect(err(chooseRange('mse', r, h))).toBeLessThanOrEqual(Math.min(...grid) * 1.01);
    expect(Math.min(...grid)).toBeLessThan(err([r.min, r.max]) * 1.01);
  });
});

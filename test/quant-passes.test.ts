// The quantization passes on a small built CNN: BatchNormalization folding against onnxruntime running
// the unfolded graph (the operator's inference definition), and the QDQ rewrite: structure, stored int8
// weights, and onnxruntime's int8 output within a few output steps of float; then the CLI on a split of such a model.
import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { loadModel, saveModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import { offramp } from './helpers/cli.js';
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { modelToProto, type Model } from '../lib/graph/ir.js';
import { encodeModel } from '../lib/onnx/codec.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { inferShapes } from '../lib/shapes/infer.js';
import { costModel } from '../lib/cost/report.js';
import { openSession, runSession, tensorFromData } from '../lib/runtime/ort.js';
import { floatValues, foldBatchNorm } from '../lib/quant/fold-bn.js';
import { activationPlan, toQdq, type ActParams } from '../lib/quant/qdq.js';
import { activationParams, quantizeWeights } from '../lib/quant/linear.js';
import { RangeObserver } from '../lib/quant/calibrate.js';

function net(): Model {
  const b = modelBuilder({ opset: 13, seed: 7 });
  const x = b.input('x', FLOAT, [1, 3, 12, 12]);
  const c = b.node('Conv', [x, b.init('w', FLOAT, [8, 3, 3, 3]), b.init('bias', FLOAT, [8])], { pads: [1, 1, 1, 1] });
  const bn = b.node('BatchNormalization', [c, b.init('gamma', FLOAT, [8], { uniform: [0.5, 2] }), b.init('beta', FLOAT, [8], { uniform: [-0.5, 0.5] }),
    b.init('mean', FLOAT, [8], { uniform: [-0.3, 0.3] }), b.init('var', FLOAT, [8], { uniform: [0.2, 3] })], { epsilon: b.float(1e-3) });
  const r = b.node('Relu', [bn]);
  const p = b.node('MaxPool', [r], { kernel_shape: [2, 2], strides: [2, 2] });
  const g = b.node('GlobalAveragePool', [p]);
  const f = b.node('Flatten', [g]);
  const y = b.node('Gemm', [f, b.init('fc', FLOAT, [5, 8]), b.init('fcb', FLOAT, [5])], { transB: 1 }, { outputs: ['logits'] })[0];
  b.output(y, FLOAT, [1, 5]);
  return b.build();
}

async function runAll(m: Model, xs: Float32Array[], extra: string[] = []): Promise<Record<string, Float32Array>[]> {
  const proto = modelToProto(m);
  proto.graph!.output = [...proto.graph!.output!, ...extra.map((name) => ({ name }))];
  const s = await openSession(encodeModel(proto));
  try {
    const out = [];
    for (const x of xs) {
      const r = await runSession(s, { x: tensorFromData(FLOAT, [1, 3, 12, 12], x) });
      out.push(Object.fromEntries(Object.entries(r).map(([k, v]) => [k, v.data as Float32Array])));
    }
    return out;
  } finally { await s.release(); }
}

const rnd = mulberry32(11);
const inputs = Array.from({ length: 40 }, () => Float32Array.from({ length: 3 * 144 }, () => rnd() * 2 - 1));

describe('BatchNormalization folding', () => {
  it('the folded conv computes what Conv + BatchNormalization compute in onnxruntime', async () => {
    const m = net();
    const { model: folded, folded: n } = foldBatchNorm(m);
    expect(n).toBe(1);
    expect(folded.graph.nodes.map((x) => x.op)).toEqual(['Conv', 'Relu', 'MaxPool', 'GlobalAveragePool', 'Flatten', 'Gemm']);
    expect(m.graph.nodes).toHaveLength(7);   // the input model is left alone
    const a = await runAll(m, inputs), b = await runAll(folded, inputs);
    let worst = 0;
    a.forEach((r, i) => r.logits.forEach((v, k) => { worst = Math.max(worst, Math.abs(v - b[i].logits[k]) / Math.max(1, Math.abs(v))); }));
    expect(worst).toBeLessThan(1e-5);
  });
});

describe('QDQ rewrite', () => {
  it('int8 weights per output channel, int32 biases at s_x·s_w, Relu fused, MaxPool sharing its input parameters; close to float in onnxruntime', async () => {
    const { model: m } = foldBatchNorm(net());
    const plan = activationPlan(m, inferShapes(m));
    const relu = m.graph.nodes.find((n) => n.op === 'Relu')!.outputs[0], conv = m.graph.nodes[0].outputs[0], pool = m.graph.nodes.find((n) => n.op === 'MaxPool')!.outputs[0];
    expect(plan.values).toContain(relu);
    expect(plan.values).not.toContain(conv);            // Conv + Relu fuse: no int8 boundary between them
    expect(plan.root.get(pool)).toBe(relu);              // MaxPool keeps its input's parameters
    // min/max ranges from the float run
    const obs = new Map(plan.values.map((v) => [v, new RangeObserver()]));
    const float = await runAll(m, inputs, plan.values.filter((v) => v !== 'x' && v !== 'logits'));
    inputs.forEach((x, i) => { obs.get('x')!.add(x); for (const v of plan.values) if (v !== 'x') obs.get(v)!.add(float[i][v]); });
    const params = new Map<string, ActParams>([...obs].map(([v, r]) => [v, activationParams(r.min, r.max)]));
    const q = toQdq(m, { params, plan, int8Inputs: new Set(), int8Outputs: new Set() });
    expect([q.weights, q.biases]).toEqual([2, 2]);
    const g = q.model.graph;
    expect(g.initializers.has('w')).toBe(false);
    const w8 = g.initializers.get('w/int8')!;
    expect(w8.dataType).toBe(3);
    expect(Array.from(new Int8Array(w8.rawData!.buffer, w8.rawData!.byteOffset, w8.rawData!.length)))
      .toEqual(Array.from(quantizeWeights(floatValues(m.graph.initializers.get('w')!)!, [8, 3, 3, 3], 0).q));
    expect(g.initializers.get('bias/int32')!.dataType).toBe(6);
    const dqW = g.nodes.find((n) => n.op === 'DequantizeLinear' && n.inputs[0] === 'w/int8')!;
    expect(Number(dqW.attrs.get('axis')!.i)).toBe(0);
    const dqFc = g.nodes.find((n) => n.op === 'DequantizeLinear' && n.inputs[0] === 'fc/int8')!;
    expect(Number(dqFc.attrs.get('axis')!.i)).toBe(0);   // Gemm with transB: output channels are the rows
    // the logits are the dequantized int8 output: on the int8 grid, within a few steps of float
    const out = await runAll(q.model, inputs);
    const { scale, zeroPoint } = params.get('logits')!;
    let worst = 0;
    out.forEach((r, i) => r.logits.forEach((v, k) => {
      const steps = v / scale + zeroPoint;
      expect(Math.abs(steps - Math.round(steps))).toBeLessThan(1e-3);
      worst = Math.max(worst, Math.abs(v - float[i].logits[k]) / scale);
    }));
    console.log(`built CNN, int8 QDQ vs float: largest logit error ${worst.toFixed(2)} int8 steps`);
    expect(worst).toBeLessThan(6);

    // cost of the QDQ file as an integer interpreter runs it. MACs: Conv 8·12·12 · 3·3·3 = 31104, Gemm 8·5 = 40,
    // both between DequantizeLinear and QuantizeLinear: all int8. Peak: at the input's QuantizeLinear, the float
    // input 3·144·4 = 1728 B and its int8 copy 432 B = 2160 B; the conv step holds 432 + 8·144 = 1584 B (the
    // float tensors around the kernel are the int8 buffers; dequantized weights are weights).
    const c = costModel(q.model);
    expect([c.model.macs, c.model.int8Macs]).toEqual([31144n, 31144n]);
    expect(c.model.peakActivationBytes).toBe(2160n);
    expect(c.nodes.filter((n) => n.int8).map((n) => n.op)).toEqual(['Conv', 'Gemm']);
    // Weights as stored: int8 216 + 40 weights, 8 + 5 weight zero points, 4 activation zero points (x, relu = pool,
    // gap = flatten, logits); int32 biases 8·4 + 5·4; float32 scales 8·4 + 5·4 per channel and 4 per tensor.
    expect(c.model.paramBytesByType).toEqual({ int8: 273n, int32: 52n, float32: 68n });
  });
});

describe('offramp quantize on a split with BatchNormalization after a bias-free Conv', () => {
  it('folds it (a bias appears), hands int8 over the cut, and the chain agrees with the model on its own data', async () => {
    const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-qbn-'));
    try {
      const b = modelBuilder({ opset: 13, seed: 3 });
      const x = b.input('x', FLOAT, ['N', 3, 12, 12]);
      const c = b.node('Conv', [x, b.init('w', FLOAT, [8, 3, 3, 3])], { pads: [1, 1, 1, 1] });
      const bn = b.node('BatchNormalization', [c, b.init('gamma', FLOAT, [8], { uniform: [0.5, 2] }), b.init('beta', FLOAT, [8], { uniform: [-0.5, 0.5] }),
        b.init('mean', FLOAT, [8], { uniform: [-0.3, 0.3] }), b.init('var', FLOAT, [8], { uniform: [0.2, 3] })]);
      const r = b.node('Relu', [bn], {}, { outputs: ['r'] })[0];
      const c2 = b.node('Conv', [r, b.init('w2', FLOAT, [4, 8, 3, 3]), b.init('b2', FLOAT, [4])], { pads: [1, 1, 1, 1] });
      const g = b.node('GlobalAveragePool', [b.node('Relu', [c2])]);
      const y = b.node('Gemm', [b.node('Flatten', [g]), b.init('fc', FLOAT, [5, 4]), b.init('fcb', FLOAT, [5])], { transB: 1 }, { outputs: ['logits'] })[0];
      b.output(y, FLOAT, ['N', 5]);
      saveModel(b.build(), path.join(tmp, 'm.onnx'));
      const rnd2 = mulberry32(5);
      writeNpy(path.join(tmp, 'x.npy'), Float32Array.from({ length: 300 * 432 }, () => rnd2() * 2 - 1), [300, 3, 12, 12]);
      for (const args of [['split', path.join(tmp, 'm.onnx'), '--cuts', 'r', '-o', path.join(tmp, 's')], ['quantize', path.join(tmp, 's'), '--data', path.join(tmp, 'x.npy'), '-o', path.join(tmp, 'q')]]) {
        const res = offramp(args);
        expect(res.code, res.stderr).toBe(0);
      }
      const m = JSON.parse(fs.readFileSync(path.join(tmp, 'q/manifest.json'), 'utf8'));
      expect(m.quantization.foldedBatchNorms).toBe(1);
      expect(m.stages[0].outputs[0]).toMatchObject({ name: 'r', dtype: 'int8', bytes: 8 * 144 });
      const s0 = loadModel(path.join(tmp, 'q', m.stages[0].file));
      expect(s0.graph.nodes.some((n) => n.op === 'BatchNormalization')).toBe(false);
      expect(s0.graph.initializers.get('w/bias/int32')?.dataType).toBe(6);
      const chk = offramp(['check', path.join(tmp, 'q'), '--against', path.join(tmp, 'm.onnx'), '--data', path.join(tmp, 'x.npy'), '--samples', '300', '--json']);
      expect(chk.code, chk.stderr).toBe(0);
      const a = JSON.parse(chk.stdout).outputs[0];
      console.log(`built CNN with BatchNormalization, int8 chain vs float on its 300 calibration rows: top-1 agreement ${(a.agreement * 100).toFixed(1)} %, largest error ${a.maxSteps.toFixed(2)} int8 steps`);
      expect(a.agreement).toBeGreaterThanOrEqual(0.9);
      expect(a.maxSteps).toBeLessThan(8);
    } finally { fs.rmSync(tmp, { recursive: true, force: true }); }
  });
});

// Issue 16, "models as exporters write them": a residual network (the ResNet-8 pattern: Conv, Conv, Add of
// the skip, Relu) split at its blocks. At graph optimisation 'all' onnxruntime fuses the whole model and the
// stage files differently (the residual Add into a Conv on one side only), one rounding step apart, which an
// exit head can amplify past check's 1e-5 (ResNet-8: 9.5e-7 at the cut, 7.3e-5 at the exit; build stopped).
// With fusion off on both sides every node runs the same kernel, so the chain must match bit for bit
// (onnxruntime as the reference: the same ONNX nodes on the same inputs).
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { loadModel, saveModel } from '../lib/graph/io.js';
import { exitRecords } from '../lib/heads/graft.js';
import { writeNpy } from '../lib/data/npy.js';
import { loadChain } from '../lib/run/chain.js';
import { checkChain, npySamples } from '../lib/run/check.js';
import { cli } from './helpers/robust.js';

const FLOAT = 1;

/** Three residual blocks of 3×3 convs (a projection where the width or stride changes), pooled, one Gemm. */
function residualNet() {
  const b = modelBuilder({ opset: 13, seed: 7 });
  let k = 0;
  const conv = (x: string, cin: number, cout: number, s = 1, size = 3) => b.node('Conv', [x, b.init(`c${k}.w`, FLOAT, [cout, cin, size, size]), b.init(`c${k++}.b`, FLOAT, [cout], { uniform: [-0.1, 0.1] })],
    { kernel_shape: [size, size], strides: [s, s], pads: size === 3 ? [1, 1, 1, 1] : [0, 0, 0, 0] });
  let x = b.node('Relu', [conv(b.input('input', FLOAT, [1, 3, 32, 32]), 3, 16)]);
  let ch = 16;
  for (const [cout, s] of [[16, 1], [32, 2], [64, 2]]) {
    const z = conv(b.node('Relu', [conv(x, ch, cout, s)]), cout, cout);
    const skip = s === 1 && ch === cout ? x : conv(x, ch, cout, s, 1);
    x = b.node('Relu', [b.node('Add', [z, skip])]);
    ch = cout;
  }
  const g = b.node('Flatten', [b.node('GlobalAveragePool', [x])], { axis: 1 });
  b.output(b.node('Gemm', [g, b.init('fc.w', FLOAT, [10, 64]), b.init('fc.b', FLOAT, [10])], { transB: 1 }), FLOAT, [1, 10]);
  return b.build();
}

let tmp: string, build: string, x: string;
beforeAll(async () => {
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-models-'));
  const model = path.join(tmp, 'res.onnx');
  saveModel(residualNet(), model);
  const r = mulberry32(3);
  x = path.join(tmp, 'x.npy');
  writeNpy(x, Float32Array.from({ length: 48 * 3 * 32 * 32 }, () => r() * 2 - 1), [48, 3, 32, 32]);
  build = path.join(tmp, 'b');
  const b = await cli(['build', model, '--data', x, '-o', build]);
  expect(b.code, b.stderr).toBe(0);
}, 120_000);
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));

describe('a residual network split at its blocks', () => {
  test('the chain is judged with fusion off on both sides: bit for bit, where fused it is not', async () => {
    const grafted = path.join(build, fs.readdirSync(build).find((f) => f.startsWith('model.'))!);
    const judged = await loadChain(build, { optimization: 'disabled' });
    const fused = await loadChain(build);
    try {
      const samples = npySamples(judged.manifest.inputs, { input: x }, 48);
      const exact = await checkChain(judged, grafted, samples, { rtol: 0 });
      for (const d of exact.diffs) expect(d.maxAbs, d.name).toBe(0);
      const f = await checkChain(fused, grafted, samples, { rtol: 0 });
      // what the fused sessions show (onnxruntime 1.23.2: about 6e-8 on the final output): logged, not asserted
      console.log(`fused: ${f.diffs.map((d) => `${d.name} ${d.maxAbs.toExponential(2)}`).join(', ')}`);
    } finally { await judged.release(); await fused.release(); }
    const c = await cli(['check', build, '--against', grafted, '--data', x, '--rtol', '0']);
    expect(c.code, c.stdout + c.stderr).toBe(0);
    expect(c.stdout).toMatch(/graph optimisation off on both sides/);
  });
});

const INT64 = 7;

/**
 * A GRU classifier as PyTorch exports one (batch_first=False inside: the GRU reads [T, N, I]): the sequence,
 * the GRU's Y [T, 1, N, H] squeezed to [T, N, H], averaged over time, then a Gemm. `timeFirst`: the model
 * input itself is [T, 1, I] with a fixed batch of 1; otherwise the input is [N, T, I], transposed first.
 */
function gruNet(timeFirst: boolean) {
  const b = modelBuilder({ opset: 13, seed: 11 });
  const T = 40, I = 16, H = 48;
  const x = b.input('seq', FLOAT, timeFirst ? [T, 1, I] : ['N', T, I]);
  const tni = timeFirst ? x : b.node('Transpose', [x], { perm: [1, 0, 2] }, { name: 'to_time_first' });
  const [y] = b.node('GRU', [tni, b.init('gru.W', FLOAT, [1, 3 * H, I], { uniform: [-0.2, 0.2] }), b.init('gru.R', FLOAT, [1, 3 * H, H], { uniform: [-0.2, 0.2] }), b.init('gru.B', FLOAT, [1, 6 * H], { uniform: [-0.1, 0.1] })],
    { hidden_size: H }, { name: 'gru', outputs: ['gru_y', 'gru_h'] });
  const steps = b.node('Squeeze', [y, b.init('axis1', INT64, [1], [1])], {}, { name: 'squeeze', outputs: ['steps'] })[0];
  const mean = b.node('ReduceMean', [steps], { axes: [0], keepdims: 0 }, { name: 'time_mean', outputs: ['pooled'] })[0];
  const logits = b.node('Gemm', [b.node('Relu', [mean]), b.init('fc.w', FLOAT, [8, H]), b.init('fc.b', FLOAT, [8])], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0];
  b.output(logits, FLOAT, [timeFirst ? 1 : 'N', 8]);
  return b.build();
}

describe('recurrent models: a head is never grafted where the batch is not the first axis', () => {
  let seq: string;
  beforeAll(() => {
    const r = mulberry32(5);
    seq = path.join(tmp, 'seq.npy');
    writeNpy(seq, Float32Array.from({ length: 32 * 40 * 16 }, () => r() * 2 - 1), [32, 40, 16]);
    saveModel(gruNet(false), path.join(tmp, 'gru.onnx'));
    saveModel(gruNet(true), path.join(tmp, 'gru-time-first.onnx'));
  });

  test('a cut at the GRU\'s time-first output is refused by name; the pooled cut after it grafts', async () => {
    const out = path.join(tmp, 'gru-exit.onnx');
    const r = await cli(['graft', path.join(tmp, 'gru.onnx'), '--cuts', 'steps', '--data', seq, '-o', out]);
    expect(r.code).toBe(1);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/cut 'steps' is \[40, 1, 48\]: its first axis is not the batch \(1 here\), as a time-first GRU output is/);
    expect(fs.existsSync(out)).toBe(false);
    const ok = await cli(['graft', path.join(tmp, 'gru.onnx'), '--cuts', 'pooled', '--data', seq, '-o', out]);
    expect(ok.code, ok.stderr).toBe(0);
  });

  test('a model whose input is time-first with a fixed batch of 1 is refused at graft and at build, before any file is written', async () => {
    const x1 = path.join(tmp, 'seq-tf.npy');
    writeNpy(x1, Float32Array.from({ length: 8 * 40 * 16 }, (_, i) => Math.sin(i)), [8, 40, 1, 16]);
    for (const args of [['graft', path.join(tmp, 'gru-time-first.onnx'), '--at', '50%', '--data', x1, '-o', path.join(tmp, 'tf.onnx')],
      ['build', path.join(tmp, 'gru-time-first.onnx'), '--data', x1, '-o', path.join(tmp, 'tf-build')]]) {
      const r = await cli(args);
      expect(r.code, r.stderr).toBe(1);
      expect(r.stderr).toMatch(/input 'seq' is \[40, 1, 16\] but the logits 'logits' \[1, 8\]: the input's first axis is not the batch/);
    }
    expect(fs.existsSync(path.join(tmp, 'tf.onnx'))).toBe(false);
    expect(fs.existsSync(path.join(tmp, 'tf-build'))).toBe(false);
  });
});

/**
 * A token model as transformer encoders are exported: [N, T, D] tokens, a MatMul projection, LayerNormalization
 * over D (scale 1, bias 0: each token's mean over D is 0, ONNX LayerNormalization), the mean over tokens, a Gemm.
 */
function tokenNet() {
  const b = modelBuilder({ opset: 17, seed: 13 });
  const T = 10, D = 16;
  const x = b.input('tokens', FLOAT, ['N', T, D]);
  const h = b.node('Add', [b.node('MatMul', [x, b.init('proj.w', FLOAT, [D, D], { uniform: [-0.5, 0.5] })]), b.init('proj.b', FLOAT, [D], { uniform: [-0.1, 0.1] })]);
  const ln = b.node('LayerNormalization', [h, b.init('ln.weight', FLOAT, [D], { fill: 1 }), b.init('ln.bias', FLOAT, [D], 'zeros')], { axis: -1, epsilon: b.float(1e-5) }, { name: 'ln', outputs: ['normed'] })[0];
  const act = b.node('Relu', [b.node('MatMul', [ln, b.init('ff.w', FLOAT, [D, D], { uniform: [-0.5, 0.5] })])]);
  const pooled = b.node('ReduceMean', [b.node('Add', [act, ln])], { axes: [1], keepdims: 0 });
  b.output(b.node('Gemm', [pooled, b.init('fc.w', FLOAT, [4, D], { uniform: [-1, 1] }), b.init('fc.b', FLOAT, [4], 'zeros')], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0], FLOAT, ['N', 4]);
  return b.build();
}

describe('token tensors [N, T, D]: heads pool over the tokens', () => {
  test('the layout is read from the graph (LayerNormalization over D); pooled over D a head would learn nothing, and graft says so', async () => {
    const model = path.join(tmp, 'tokens.onnx'), data = path.join(tmp, 'tokens.npy');
    saveModel(tokenNet(), model);
    const r = mulberry32(9);
    writeNpy(data, Float32Array.from({ length: 400 * 10 * 16 }, () => r() * 2 - 1), [400, 10, 16]);
    const out = path.join(tmp, 'tokens-g.onnx');
    const g = await cli(['graft', model, '--cuts', 'normed', '--data', data, '--held-out', '0.25', '--json', '-o', out]);
    expect(g.code, g.stderr).toBe(0);
    const j = JSON.parse(g.stdout);
    expect(j.exits[0].layout).toBe('NTD');
    // the head sees the final output's own features (the mean over tokens of the LayerNorm output, before the residual branch)
    expect(j.exits[0].fit.agreement).toBeGreaterThan(0.6);
    expect(j.warnings).toBeUndefined();
    // forced to pool over D, every row's features are the same zeros (up to rounding): the head answers the majority
    // (a linear head: a grid over D, which graft would choose here, reads a little of what pooling threw away)
    const n = await cli(['graft', model, '--cuts', 'normed', '--layout', 'NCL', '--head', 'linear', '--data', data, '--held-out', '0.25', '-o', out]);
    expect(n.code, n.stderr).toBe(0);
    expect(n.stdout).toMatch(/warning: exit-0 at 'normed' agrees with the final output on [\d.]+ % of held-out rows, no more than always answering its most common class \([\d.]+ %\): the head reads nothing useful there; the cut \[1, 10, 16\] was pooled as NCL: if its last axis holds the features \(tokens × features\), give --layout NTD/);
    // build fits its candidate heads the same way: token layout read from the graph, every head above chance
    const b = await cli(['build', model, '--data', data, '--candidates', '3', '--max-exits', '1', '--max-drop', '100', '--json', '-o', path.join(tmp, 'tokens-b')]);
    expect(b.code, b.stderr).toBe(0);
    const bdir = path.join(tmp, 'tokens-b');
    const exits = exitRecords(loadModel(path.join(bdir, fs.readdirSync(bdir).find((f) => f.startsWith('model.'))!)));
    const rank3 = exits.filter((e) => e.layout !== 'NC');
    expect(rank3.length, JSON.stringify(exits)).toBeGreaterThan(0);
    for (const e of rank3) expect(e.layout, e.cut).toBe('NTD');
    expect(b.stdout).not.toMatch(/reads nothing useful/);
  });
});

/** A small CNN as exported at opset 11: Conv, Relu, MaxPool, Squeeze with its axes as an attribute, Gemm; `softmaxAxis`: a Softmax over that axis of [N, C, H, W] before the pooling. */
function cnnOpset11(softmaxAxis?: number) {
  const b = modelBuilder({ opset: 11, seed: 17 });
  let k = 0;
  const conv = (x: string, cin: number, cout: number) => b.node('Conv', [x, b.init(`c${k}.w`, FLOAT, [cout, cin, 3, 3]), b.init(`c${k++}.b`, FLOAT, [cout], { uniform: [-0.1, 0.1] })], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] });
  let x = b.node('MaxPool', [b.node('Relu', [conv(b.input('image', FLOAT, ['N', 1, 16, 16]), 1, 8)])], { kernel_shape: [2, 2], strides: [2, 2] });
  x = b.node('Relu', [conv(x, 8, 16)]);
  if (softmaxAxis !== undefined) x = b.node('Softmax', [x], { axis: softmaxAxis });
  const pooled = b.node('Squeeze', [b.node('GlobalAveragePool', [x])], { axes: [2, 3] });
  b.output(b.node('Gemm', [pooled, b.init('fc.w', FLOAT, [5, 16]), b.init('fc.b', FLOAT, [5])], { transB: 1 }, { name: 'fc', outputs: ['logits'] })[0], FLOAT, ['N', 5]);
  return b.build();
}

describe('opset 11 models quantize: raised to 13 where every operator means the same, refused by operator where not', () => {
  test('a CNN at opset 11 (Squeeze axes as an attribute) quantizes, says so, and its int8 chain agrees with the float model', async () => {
    const model = path.join(tmp, 'cnn11.onnx'), data = path.join(tmp, 'img.npy');
    saveModel(cnnOpset11(), model);
    const r = mulberry32(21);
    writeNpy(data, Float32Array.from({ length: 64 * 256 }, () => r()), [64, 1, 16, 16]);
    const grafted = path.join(tmp, 'cnn11-g.onnx'), split = path.join(tmp, 'cnn11-s'), q = path.join(tmp, 'cnn11-q');
    for (const args of [['graft', model, '--at', '30%', '--data', data, '-o', grafted], ['split', grafted, '-o', split]]) {
      const x = await cli(args);
      expect(x.code, x.stderr).toBe(0);
    }
    const qr = await cli(['quantize', split, '--data', data, '-o', q]);
    expect(qr.code, qr.stderr).toBe(0);
    expect(qr.stdout).toMatch(/^opset {6}11 raised to 13 \(per-channel QuantizeLinear needs it; every operator of the stages means the same there\)$/m);
    const m = JSON.parse(fs.readFileSync(path.join(q, 'manifest.json'), 'utf8'));
    expect(m.quantization.opset).toEqual({ from: 11, to: 13 });
    for (const st of m.stages) expect(loadModel(path.join(q, st.file)).opsets.get('')).toBe(13);
    const c = await cli(['check', q, '--against', grafted, '--data', data, '--min-agreement', '0.9']);
    expect(c.code, c.stdout + c.stderr).toBe(0);
  });

  test('a Softmax over a channel axis of a rank-4 tensor (coerced to 2-D before 13) is refused by name', async () => {
    const model = path.join(tmp, 'cnn11-softmax.onnx'), data = path.join(tmp, 'img.npy');
    saveModel(cnnOpset11(1), model);
    const split = path.join(tmp, 'cnn11-sm-s');
    expect((await cli(['split', model, '--at', '30%', '-o', split])).code).toBe(0);
    const qr = await cli(['quantize', split, '--data', data, '-o', path.join(tmp, 'cnn11-sm-q')]);
    expect(qr.code).toBe(1);
    expect(qr.stderr.trim().split('\n')).toHaveLength(1);
    expect(qr.stderr).toMatch(/opset 11: Softmax .*over axis 1 of a rank-4 tensor coerces its input to 2-D before opset 13/);
    expect(fs.existsSync(path.join(tmp, 'cnn11-sm-q', 'manifest.json'))).toBe(false);
  });
});

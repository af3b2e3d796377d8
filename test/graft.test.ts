// Grafting exit heads: graph passes, capture, CLI. Small code-made nets with
// seeded weights; the reference for the exits' logits is our own float64 head
// arithmetic on the captured features, and for pooling the plain channel mean.
import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { modelToProto, type Model } from '../lib/graph/ir.js';
import { encodeModel } from '../lib/onnx/codec.js';
import { loadModel, saveModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import { openSession, runSession, zeros } from '../lib/runtime/ort.js';
import { graftExits, type DataSource } from '../lib/heads/fit-heads.js';
import { captureFeatures } from '../lib/heads/capture.js';
import { axesFor, parseHead, type Layout } from '../lib/heads/spec.js';
import { exitRecords } from '../lib/heads/graft.js';
import { linearLogits } from '../lib/fit/softmax.js';
import { mlpLogits } from '../lib/fit/mlp.js';
import { main } from '../lib/cli/main.js';

const N = 240, SAMPLE = [3, 8, 8], PER = 3 * 8 * 8, K = 5;

/** Conv-Relu (a), Conv-Relu (b), plus NHWC and NCL/NTD views of a; GAP-Gemm logits. */
function net(opset = 17): Model {
  const b = modelBuilder({ opset, seed: 3, name: 'tiny' });
  const x = b.input('input', FLOAT, ['N', ...SAMPLE]);
  const a = b.node('Relu', [b.node('Conv', [x, b.init('c1.w', FLOAT, [4, 3, 3, 3]), b.init('c1.b', FLOAT, [4])], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] })], {}, { outputs: ['a'] })[0];
  const nhwc = b.node('Transpose', [a], { perm: [0, 2, 3, 1] }, { outputs: ['a_nhwc'] })[0];
  const back = b.node('Transpose', [nhwc], { perm: [0, 3, 1, 2] });
  const ncl = b.node('Reshape', [back, b.init('shape3', 7, [3], [0, 4, 64])], {}, { outputs: ['a_ncl'] })[0];
  const ntd = b.node('Transpose', [ncl], { perm: [0, 2, 1] }, { outputs: ['a_ntd'] })[0];
  const a2 = b.node('Reshape', [b.node('Transpose', [ntd], { perm: [0, 2, 1] }), b.init('shape4', 7, [4], [0, 4, 8, 8])]);
  const c = b.node('Relu', [b.node('Conv', [a2, b.init('c2.w', FLOAT, [6, 4, 3, 3]), b.init('c2.b', FLOAT, [6])], { kernel_shape: [3, 3], strides: [2, 2], pads: [1, 1, 1, 1] })], {}, { outputs: ['b'] })[0];
  const f = b.node('Flatten', [b.node('GlobalAveragePool', [c])], { axis: 1 }, { outputs: ['feat'] })[0];
  const y = b.node('Gemm', [f, b.init('fc.w', FLOAT, [K, 6], { uniform: [-3, 3] }), b.init('fc.b', FLOAT, [K])], { transB: 1 }, { outputs: ['logits'] })[0];
  b.output(y, FLOAT, ['N', K]);
  return b.build();
}

const rnd = mulberry32(42);
const X = Float32Array.from({ length: N * PER }, () => 2 * rnd() - 1);
const labels = Int32Array.from({ length: N }, () => Math.floor(rnd() * K));
const source = (): DataSource => ({
  rows: N,
  *batches(b) { for (let s = 0; s < N; s += b) { const r = Math.min(b, N - s); yield { rows: r, data: X.subarray(s * PER, (s + r) * PER) }; } },
});

async function runModel(m: Model): Promise<Record<string, Float32Array>> {
  const s = await openSession(encodeModel(modelToProto(m)));
  const x = zeros({ dtype: FLOAT, shape: [N, ...SAMPLE] });
  (x.data as Float32Array).set(X);
  const out = await runSession(s, { input: x });
  await s.release();
  return Object.fromEntries(Object.entries(out).map(([k, v]) => [k, v.data as Float32Array]));
}

const maxDiff = (a: ArrayLike<number>, b: ArrayLike<number>) => { let m = 0; for (let i = 0; i < a.length; i++) m = Math.max(m, Math.abs(a[i] - b[i])); return m; };

describe('pooling follows the layout', () => {
  for (const opset of [17, 18]) it(`NCHW, NHWC, NCL and NTD views of one tensor pool to the same features (opset ${opset})`, async () => {
    const m = net(opset);
    const views: [string, number[], Layout | undefined][] = [['a', [1, 4, 8, 8], undefined], ['a_nhwc', [1, 8, 8, 4], 'NHWC'], ['a_ncl', [1, 4, 64], undefined], ['a_ntd', [1, 64, 4], 'NTD']];
    const heads = views.map(([cut, shape, layout]) => ({ cut, rank: shape.length, axes: axesFor(shape, layout, cut), width: 4 }));
    const cap = await captureFeatures(m, heads, K, source().batches(100), { input: 'input', sample: SAMPLE, final: 'logits' });
    // Reference: the channel mean of 'a' computed here from the runtime's own 'a'.
    const raw = await runModel({ ...m, graph: { ...m.graph, outputs: [...m.graph.outputs, { ...m.graph.outputs[0], name: 'a', type: undefined }] } } as Model);
    const mean = new Float64Array(N * 4);
    for (let i = 0; i < N; i++) for (let c = 0; c < 4; c++) { let s = 0; for (let p = 0; p < 64; p++) s += raw.a[(i * 4 + c) * 64 + p]; mean[i * 4 + c] = s / 64; }
    for (const f of cap.features) expect(maxDiff(f.X, mean)).toBeLessThan(1e-5);
    expect(cap.n).toBe(N);
  });

  it('defaults by rank and refuses a layout of another rank', () => {
    expect(axesFor([1, 8, 4, 4], undefined, 'x').pool).toEqual([2, 3]);
    expect(axesFor([1, 8, 10], undefined, 'x').pool).toEqual([2]);
    expect(axesFor([1, 8], undefined, 'x').pool).toEqual([]);
    expect(() => axesFor([1, 8, 10], 'NHWC', 'x')).toThrow(/rank 4/);
    expect(() => parseHead('mlp')).toThrow(/size/);
    expect(parseHead('conv:16')).toEqual({ kind: 'conv', channels: 16 });
  });
});

describe('grid heads', () => {
  it('grid:3 pools each channel over a 3×3 grid of windows (the last one partial) and the exits compute the fitted heads', async () => {
    const m = net();
    const r = await graftExits(m, source(), { cuts: ['a', 'b'], head: parseHead('grid:3'), labels, seed: 7 });
    // 'a' is [4, 8, 8]: windows of ⌈8/3⌉ = 3, covering rows 0–2, 3–5 and 6–7 (ONNX AveragePool, ceil_mode 1, padding not counted)
    expect(r.heads[0].grid).toEqual([3, 3]);
    expect(r.heads[0].layers[0].in).toBe(4 * 9);
    expect(r.heads[1].layers[0].in).toBe(6 * 4); // 'b' is [6, 4, 4]: windows of 2, a 2×2 grid
    const cap = await captureFeatures(m, r.heads.map((h) => ({ ...h, width: h.layers[0].in })), K, source().batches(60), { input: 'input', sample: SAMPLE, final: 'logits' });
    // Reference: the plain window means of the runtime's own 'a', channel-major.
    const raw = await runModel({ ...m, graph: { ...m.graph, outputs: [...m.graph.outputs, { ...m.graph.outputs[0], name: 'a', type: undefined }] } } as Model);
    const ref = new Float64Array(N * 36);
    const span = (g: number) => [g * 3, Math.min(8, g * 3 + 3)];
    for (let i = 0; i < N; i++) for (let c = 0; c < 4; c++) for (let gy = 0; gy < 3; gy++) for (let gx = 0; gx < 3; gx++) {
      const [y0, y1] = span(gy), [x0, x1] = span(gx);
      let sum = 0;
      for (let y = y0; y < y1; y++) for (let x = x0; x < x1; x++) sum += raw.a[((i * 4 + c) * 8 + y) * 8 + x];
      ref[i * 36 + c * 9 + gy * 3 + gx] = sum / ((y1 - y0) * (x1 - x0));
    }
    expect(maxDiff(cap.features[0].X, ref)).toBeLessThan(1e-5);
    const got = await runModel(r.model);
    r.heads.forEach((h, k) => expect(maxDiff(got[`exit-${k}`], linearLogits(cap.features[k], h.layers[0].W, h.layers[0].b, K))).toBeLessThan(1e-4));
    expect(exitRecords(r.model).map((e) => e.head)).toEqual(['grid:3', 'grid:3']);
  });
  it('refuses channels-last cuts and a grid without a size', async () => {
    await expect(graftExits(net(), source(), { cuts: ['a_nhwc'], layout: 'NHWC', head: parseHead('grid:2'), labels })).rejects.toThrow(/channels-first/);
    expect(() => parseHead('grid')).toThrow(/size/);
  });
});

describe('graft', () => {
  for (const head of ['linear', 'mlp:8', 'conv:6']) it(`${head}: exits compute the fitted heads, original output bit-identical`, async () => {
    const m = net();
    const cuts = ['a_nhwc', 'b'];
    const r = await graftExits(m, source(), { cuts, head: parseHead(head), labels: head === 'linear' ? labels : undefined, seed: 7 });
    expect(r.model.graph.outputs.map((o) => o.name)).toEqual(['logits', 'exit-0', 'exit-1']);
    const [orig, got] = [await runModel(m), await runModel(r.model)];
    expect(Buffer.from(got.logits.buffer).equals(Buffer.from(orig.logits.buffer))).toBe(true);
    // The heads' logits recomputed here from captured features must match the runtime's exits.
    const cap = await captureFeatures(m, r.heads.map((h) => ({ ...h, width: h.proj ? h.proj.out : h.layers[0].in })), K, source().batches(60), { input: 'input', sample: SAMPLE, final: 'logits' });
    r.heads.forEach((h, k) => {
      const F = cap.features[k];
      const z = h.layers.length === 1 ? linearLogits(F, h.layers[0].W, h.layers[0].b, K)
        : mlpLogits(F, { d: F.d, h: h.layers[0].out, k: K, W1: h.layers[0].W, b1: h.layers[0].b, W2: h.layers[1].W, b2: h.layers[1].b });
      expect(maxDiff(got[`exit-${k}`], z)).toBeLessThan(1e-4);
    });
    const recs = exitRecords(r.model);
    expect(recs.map((e) => [e.exit, e.output, e.cut, e.head, e.classes])).toEqual([[0, 'exit-0', 'a_nhwc', head, K], [1, 'exit-1', 'b', head, K]]);
    expect(recs[0].layout).toBe('NCHW'); // rank 4 defaults to NCHW when no layout is given
    for (const e of recs) {
      expect(e.fit.samples + e.fit.heldOut).toBe(N);
      expect(e.fit.agreement).toBeGreaterThanOrEqual(0); // labels here are random: no agreement is promised
      expect(e.fit.accuracy === undefined).toBe(head !== 'linear');
    }
    if (head === 'linear') expect(recs[1].macs).toBe(6 * K);
    if (head === 'mlp:8') expect(recs[1].params).toBe(6 * 8 + 8 + 8 * K + K);
  });

  it('same inputs and seed give a byte-identical model; a grafted model is refused', async () => {
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-graft-'));
    const files = [0, 1].map((i) => path.join(dir, `g${i}.onnx`));
    for (const f of files) saveModel((await graftExits(net(), source(), { cuts: ['b'], head: parseHead('mlp:4'), seed: 3 })).model, f);
    expect(fs.readFileSync(files[0]).equals(fs.readFileSync(files[1]))).toBe(true);
    await expect(graftExits(loadModel(files[0]), source(), { cuts: ['a'], head: parseHead('linear') })).rejects.toThrow(/already has exits/);
    fs.rmSync(dir, { recursive: true });
  });

  it('checks labels against the data and the classes', async () => {
    await expect(graftExits(net(), source(), { cuts: ['b'], head: parseHead('linear'), labels: labels.subarray(1) })).rejects.toThrow(/labels for/);
    await expect(graftExits(net(), source(), { cuts: ['b'], head: parseHead('linear'), labels: labels.map(() => 9) })).rejects.toThrow(/outside 0\.\.4/);
    await expect(graftExits(net(), source(), { cuts: ['nope'], head: parseHead('linear') })).rejects.toThrow(/names no value/);
  });
});

describe('offramp graft', () => {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-graft-cli-'));
  const model = path.join(dir, 'tiny.onnx'), xs = path.join(dir, 'x.npy'), ys = path.join(dir, 'y.npy'), out = path.join(dir, 'out.onnx');
  saveModel(net(), model);
  writeNpy(xs, X, [N, ...SAMPLE]);
  writeNpy(ys, BigInt64Array.from(labels, BigInt), [N]);
  const capture = async (args: string[]) => {
    let text = '';
    const w = process.stdout.write.bind(process.stdout);
    process.stdout.write = ((s: string) => { text += s; return true; }) as typeof process.stdout.write;
    try { return { code: await main(args), text }; } finally { process.stdout.write = w; }
  };

  it('--cuts with labels, --json report', async () => {
    const { code, text } = await capture(['graft', model, '--cuts', 'a,b', '--data', xs, '--labels', ys, '-o', out, '--json']);
    expect(code).toBe(0);
    const j = JSON.parse(text);
    expect(j.schema).toBe('offramp-graft/1');
    expect(j.exits.map((e: { cut: string }) => e.cut)).toEqual(['a', 'b']);
    expect(typeof j.exits[0].fit.accuracy).toBe('number');
    expect(loadModel(out).graph.outputs.map((o) => o.name)).toEqual(['logits', 'exit-0', 'exit-1']);
  });

  it('--at picks clean cuts; table report', async () => {
    const { code, text } = await capture(['graft', model, '--at', '50%', '--data', xs, '--head', 'mlp:4', '-o', out]);
    expect(code).toBe(0);
    expect(text).toMatch(/exit-0 .* mlp:4/);
  });

  it('usage errors', async () => {
    expect((await capture(['graft', model, '--cuts', 'a', '--at', '50%', '--data', xs, '-o', out])).code).toBe(2);
    expect((await capture(['graft', model, '--cuts', 'a', '--data', xs, '--head', 'tree', '-o', out])).code).toBe(2);
    expect((await capture(['graft', model, '--cuts', 'a', '--data', ys, '-o', out])).code).toBe(1);
  });
});

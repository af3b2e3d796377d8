// The staged runner against a plain reference: each stage file run through onnxruntime-node's public
// session API (the runner as it was before it ran the native session on the caller's turn). Outputs
// must agree bit for bit, exits and MACs exactly.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { modelBuilder, mulberry32, type ModelBuilder } from '../lib/graph/build.js';
import { loadModel, saveModel } from '../lib/graph/io.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { resolveCut, scanModel } from '../lib/cuts/scan.js';
import { writeSplit, type Manifest } from '../lib/split/manifest.js';
import { loadChain, type ChainResult } from '../lib/run/chain.js';
import { openSession, runSession, tensorFromData, type OrtTensor } from '../lib/runtime/ort.js';

const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-chain-batch-'));
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));

const conv = (b: ModelBuilder, x: string, cin: number, cout: number) =>
  b.node('Relu', [b.node('Conv', [x, b.init(b.fresh('w'), FLOAT, [cout, cin, 3, 3]), b.init(b.fresh('bias'), FLOAT, [cout])], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] })]);
const head = (b: ModelBuilder, x: string, cin: number, name: string) =>
  b.node('Gemm', [b.node('Flatten', [b.node('GlobalAveragePool', [x])]), b.init(b.fresh('hw'), FLOAT, [cin, 4]), b.init(b.fresh('hb'), FLOAT, [4])], {}, { outputs: [name] })[0];

/** Three conv blocks, an exit head after the first two, a classifier; split after blocks 1 and 2. */
async function split(): Promise<string> {
  const batch = 1;
  const b = modelBuilder({ opset: 17, seed: 5 });
  const x = b.input('x', FLOAT, [batch, 3, 12, 12]);
  const h1 = conv(b, x, 3, 8);
  b.output(head(b, h1, 8, 'exit-0'), FLOAT, [batch, 4]);
  const h2 = b.node('MaxPool', [conv(b, h1, 8, 16)], { kernel_shape: [2, 2], strides: [2, 2] });
  b.output(head(b, h2, 16, 'exit-1'), FLOAT, [batch, 4]);
  b.output(head(b, conv(b, h2, 16, 16), 16, 'logits'), FLOAT, [batch, 4]);
  const file = path.join(tmp, 'net.onnx');
  saveModel(b.build(), file);
  const plan = await scanModel(loadModel(file));
  const dir = path.join(tmp, 'split');
  writeSplit(plan, [resolveCut(plan, h1), resolveCut(plan, h2)], dir, file);
  return dir;
}

/** The reference: every stage through the public session API, one frame at a time. */
async function reference(dir: string, x: OrtTensor, stop: (exit: string, z: Float32Array) => boolean): Promise<ChainResult> {
  const m: Manifest = JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8'));
  const env = new Map<string, OrtTensor>([['x', x]]);
  let macs = 0;
  const outputs = () => Object.fromEntries(m.outputs.filter((o) => env.has(o.name)).map((o) => [o.name, env.get(o.name)!]));
  for (const s of m.stages) {
    const session = await openSession(fs.readFileSync(path.join(dir, s.file)));
    try {
      for (const [k, v] of Object.entries(await runSession(session, Object.fromEntries(s.inputs.map((i) => [i.name, env.get(i.name)!]))))) env.set(k, v);
    } finally { await session.release(); }
    macs += s.macs;
    for (const e of s.exits) if (stop(e, env.get(e)!.data as Float32Array)) return { outputs: outputs(), exit: e, macs, stagesRun: s.index + 1 };
  }
  return { outputs: outputs(), exit: null, macs, stagesRun: m.stages.length };
}

const bytesOf = (t: OrtTensor) => { const d = t.data as Float32Array; return Buffer.from(d.buffer, d.byteOffset, d.byteLength); };
function expectSame(got: ChainResult, want: ChainResult) {
  expect({ exit: got.exit, macs: got.macs, stagesRun: got.stagesRun, names: Object.keys(got.outputs) })
    .toEqual({ exit: want.exit, macs: want.macs, stagesRun: want.stagesRun, names: Object.keys(want.outputs) });
  for (const [k, t] of Object.entries(want.outputs)) {
    expect(got.outputs[k].dims).toEqual(t.dims);
    expect(bytesOf(got.outputs[k]).equals(bytesOf(t)), k).toBe(true);
  }
}

// A rule that sends frames out at each exit and to the end, depending on the data: above the median of
// the first logit (over these frames) at exit-0, above the median of the third at exit-1.
let t0 = 0, t1 = 0;
const stop = (exit: string, z: Float32Array) => (exit === 'exit-0' ? z[0] > t0 : z[2] > t1);
const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[xs.length >> 1];

describe('staged runner against the public-API reference', () => {
  const N = 23, per = 3 * 12 * 12;
  const rnd = mulberry32(9);
  const data = Float32Array.from({ length: N * per }, () => rnd() * 2 - 1);
  const frame = (f: number) => tensorFromData(FLOAT, [1, 3, 12, 12], data.slice(f * per, (f + 1) * per));

  it('every frame bit for bit, with and without a policy; stopped frames carry only what ran', async () => {
    const dir = await split();
    const chain = await loadChain(dir);
    try {
      const full: ChainResult[] = [];
      for (let f = 0; f < N; f++) full.push(await reference(dir, frame(f), () => false));
      t0 = median(full.map((r) => (r.outputs['exit-0'].data as Float32Array)[0]));
      t1 = median(full.map((r) => (r.outputs['exit-1'].data as Float32Array)[2]));
      const want: ChainResult[] = [];
      for (let f = 0; f < N; f++) want.push(await reference(dir, frame(f), stop));
      // the rule must leave frames at both exits and at the end, or the test proves little
      expect(new Set(want.map((r) => r.exit))).toEqual(new Set(['exit-0', 'exit-1', null]));
      for (let f = 0; f < N; f++) {
        expectSame(await chain.run({ x: frame(f) }, { policy: (e) => stop(e.name, e.value.data as Float32Array) }), want[f]);
        expectSame(await chain.run({ x: frame(f) }), full[f]);
      }
      await expect(chain.run({})).rejects.toThrow(/stage 0 needs 'x', a model input not given/);
    } finally { await chain.release(); }
  });
});

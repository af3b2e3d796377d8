// Staged chain vs the whole model in onnxruntime-node, batch 1, per frame: ResNet-18 and a small
// CNN (7.4 M MACs, 28×28 grey input), each split in 4 stages at the clean cuts nearest 25/50/75 %
// of the MACs; the Fashion-MNIST fixture CNN (1.9 M MACs) after its blocks, for reference. Both through the same runtime path (openSyncSession,
// what the runner uses); for comparison also the awaited public session API per stage, as the
// runner ran before. Runs interleave (whole, chain, …, then the reverse order) and each round
// gives a ratio; the median of those is the figure, so the machine's drift hits both sides alike. Then replay's frames per second on the CNN with exit heads.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { resnet18 } from '../test/helpers/nets.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { modelBuilder, mulberry32, type ModelBuilder } from '../lib/graph/build.js';
import type { Model } from '../lib/graph/ir.js';
import { cutsAtFractions, resolveCut, scanModel, type Cut, type CutPlan } from '../lib/cuts/scan.js';
import { writeSplit } from '../lib/split/manifest.js';
import { loadChain } from '../lib/run/chain.js';
import { openSession, openSyncSession, randomTensor, runSession, type OrtTensor } from '../lib/runtime/ort.js';
import { writeNpy } from '../lib/data/npy.js';
import { chainLayout } from '../lib/tune/chain-capture.js';
import { replay } from '../lib/tune/replay.js';

export interface ChainPair {
  model: string; macs: number; stages: number; runs: number;
  /** medians per frame, ms: the whole model and the chain through the runner's path */
  wholeMs: number; chainMs: number; ratio: number;
  /** the same through the awaited public session API, one call per stage (the runner before) */
  wholeApiMs: number; chainApiMs: number; apiRatio: number;
}
export interface ReplayBench { frames: number; reps: number; fps: number; wholeFps: number; /** median over reps of replay's rate ÷ the whole model's */ ratio: number; meanStages: number; stages: number }
export interface ChainBench { resnet: ChainPair; cnn: ChainPair; fixture?: ChainPair; replay: ReplayBench }

const median = (xs: number[]) => { const s = [...xs].sort((a, b) => a - b); return s[s.length >> 1]; };
const FIXTURE = path.join(path.dirname(fileURLToPath(import.meta.url)), '..', '..', 'test', 'fixtures', 'fmnist', 'cnn.onnx');

/**
 * The small CNN, four blocks of about 1.8 M MACs each (3×3 convs with Relu): conv 1→16, conv 16→16,
 * pool | conv 16→64, pool | conv 64→64 | conv 64→64, global pool, linear 64→10 (7.4 M MACs). With
 * `heads`, a linear exit head (global pool → 10 logits) after each of the first three blocks.
 * Returns the block outputs, the clean cuts nearest 25/50/75 % of the MACs.
 */
export function smallCnn(heads = false): { model: Model; cuts: string[] } {
  const b = modelBuilder({ opset: 17, seed: 3, name: 'small-cnn' });
  const conv = (x: string, cin: number, cout: number) => b.node('Relu', [b.node('Conv', [x,
    b.init(b.fresh('w'), FLOAT, [cout, cin, 3, 3], { uniform: [-0.3, 0.3] }), b.init(b.fresh('b'), FLOAT, [cout], { uniform: [-0.1, 0.1] })], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] })]);
  const pool = (x: string) => b.node('MaxPool', [x], { kernel_shape: [2, 2], strides: [2, 2] });
  const linear = (x: string, cin: number, name: string) => b.node('Gemm', [b.node('Flatten', [b.node('GlobalAveragePool', [x])]),
    b.init(b.fresh('fc'), FLOAT, [10, cin], { uniform: [-1, 1] }), b.init(b.fresh('fcb'), FLOAT, [10], { uniform: [-0.1, 0.1] })], { transB: 1 }, { outputs: [name] })[0];
  const x0 = b.input('input', FLOAT, [1, 1, 28, 28]);
  const x1 = pool(conv(conv(x0, 1, 16), 16, 16)), x2 = pool(conv(x1, 16, 64)), x3 = conv(x2, 64, 64), x4 = conv(x3, 64, 64);
  const cuts = [x1, x2, x3];
  if (heads) cuts.forEach((c, i) => b.output(linear(c, [16, 64, 64][i], `exit-${i}`), FLOAT, [1, 10]));
  b.output(linear(x4, 64, 'logits'), FLOAT, [1, 10]);
  return { model: b.build(), cuts };
}

async function split(dir: string, name: string, model: Model | string, cuts: (plan: CutPlan) => Cut[]): Promise<{ file: string; split: string }> {
  let file: string;
  if (typeof model === 'string') file = model;
  else saveModel(model, (file = path.join(dir, `${name}.onnx`)));
  const plan = await scanModel(loadModel(file));
  const out = path.join(dir, `${name}-split`);
  writeSplit(plan, cuts(plan), out, file);
  return { file, split: out };
}

async function pair(model: string, file: string, splitDir: string, shape: number[], runs: number, warmup: number): Promise<ChainPair> {
  const chain = await loadChain(splitDir);
  const bytes = fs.readFileSync(file);
  const whole = openSyncSession(bytes, file), wholeApi = await openSession(bytes, file);
  const stagesApi = await Promise.all(chain.manifest.stages.map((s) => openSession(fs.readFileSync(path.join(splitDir, s.file)))));
  const feeds = { [chain.manifest.inputs[0].name]: randomTensor({ dtype: FLOAT, shape }, mulberry32(1)) };
  // the runner as it was: every stage through the awaited public API
  const chainApi = async () => {
    const env = new Map<string, OrtTensor>(Object.entries(feeds));
    for (const s of chain.manifest.stages) {
      const out = await runSession(stagesApi[s.index], Object.fromEntries(s.inputs.map((i) => [i.name, env.get(i.name)!])));
      for (const [k, v] of Object.entries(out)) env.set(k, v);
    }
  };
  const t: Record<'w' | 'c' | 'wa' | 'ca', number[]> = { w: [], c: [], wa: [], ca: [] };
  const time = async (k: keyof typeof t, i: number, f: () => unknown) => {
    const t0 = process.hrtime.bigint();
    await f();
    if (i >= warmup) t[k].push(Number(process.hrtime.bigint() - t0) / 1e6);
  };
  const steps: [keyof typeof t, () => unknown][] = [['w', () => whole.run(feeds)], ['c', () => chain.run(feeds)], ['wa', () => runSession(wholeApi, feeds)], ['ca', chainApi]];
  try {
    // every other round in reverse order, so that neither side always runs first (warm caches)
    for (let i = 0; i < warmup + runs; i++) for (const [k, f] of i % 2 ? [...steps].reverse() : steps) await time(k, i, f);
  } finally {
    whole.release(); await wholeApi.release(); await chain.release();
    for (const s of stagesApi) await s.release();
  }
  // a ratio per round, then their median: rounds are close in time, so drift of the machine cancels
  const ratio = (a: number[], b: number[]) => median(a.map((x, i) => x / b[i]));
  return {
    model, macs: chain.manifest.totals.macs, stages: chain.manifest.stages.length, runs,
    wholeMs: median(t.w), chainMs: median(t.c), ratio: ratio(t.c, t.w),
    wholeApiMs: median(t.wa), chainApiMs: median(t.ca), apiRatio: ratio(t.ca, t.wa),
  };
}

/**
 * replay() over `frames` random frames through the CNN with exit heads under a confidence policy,
 * `reps` times, each followed by the whole model run on as many frames (interleaved); medians.
 */
async function benchReplay(dir: string, frames: number, reps: number): Promise<ReplayBench> {
  const { model, cuts } = smallCnn(true);
  const { file, split: out } = await split(dir, 'small-cnn-heads', model, (p) => cuts.map((c) => resolveCut(p, c)));
  // frames of random pixels at random brightness, so that the exits' confidence varies from frame to frame
  const data = path.join(dir, 'frames.npy'), rnd = mulberry32(11), x = new Float32Array(frames * 784);
  for (let f = 0; f < frames; f++) { const s = rnd() ** 2; for (let i = 0; i < 784; i++) x[f * 784 + i] = s * rnd(); }
  writeNpy(data, x, [frames, 1, 28, 28]);
  const chain = await loadChain(out), whole = openSyncSession(fs.readFileSync(file), file);
  const policy = { kind: 'confidence' as const, thresholds: [0.3, 0.5, 0.5] };
  try {
    const layout = chainLayout(chain.manifest, out);
    const x = { input: randomTensor({ dtype: FLOAT, shape: [1, 1, 28, 28] }, mulberry32(2)) };
    const fps: number[] = [], wholeFps: number[] = [], ratio: number[] = [];
    let meanStages = 0;
    for (let k = 0; k <= reps; k++) {
      let t0 = process.hrtime.bigint();
      const r = await replay(chain, layout, policy, data);
      const tr = Number(process.hrtime.bigint() - t0) / 1e9;
      t0 = process.hrtime.bigint();
      for (let i = 0; i < frames; i++) whole.run(x);
      const tw = Number(process.hrtime.bigint() - t0) / 1e9;
      if (k === 0) continue; // warm-up
      fps.push(frames / tr); wholeFps.push(frames / tw); ratio.push(tw / tr);
      const stageOf = [...layout.exitStage, chain.manifest.stages.length - 1];
      meanStages = r.frames.reduce((a, f) => a + stageOf[f.exit] + 1, 0) / frames;
    }
    return { frames, reps, fps: median(fps), wholeFps: median(wholeFps), ratio: median(ratio), meanStages, stages: chain.manifest.stages.length };
  } finally { whole.release(); await chain.release(); }
}

export async function benchChain(): Promise<ChainBench> {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-bench-chain-'));
  try {
    const cnnModel = smallCnn();
    const cnnSplit = await split(dir, 'small-cnn', cnnModel.model, (p) => cutsAtFractions(p, [0.25, 0.5, 0.75]));
    const cnn = await pair('small CNN', cnnSplit.file, cnnSplit.split, [1, 1, 28, 28], 1500, 100);
    let fixture: ChainPair | undefined;
    if (fs.existsSync(FIXTURE)) {
      const fx = await split(dir, 'fmnist', FIXTURE, (p) => ['/b1/b1.2/MaxPool_output_0', '/b2/b2.2/MaxPool_output_0', '/b3/b3.2/MaxPool_output_0'].map((c) => resolveCut(p, c)));
      fixture = await pair('Fashion-MNIST CNN', fx.file, fx.split, [1, 1, 28, 28], 1500, 100);
    }
    const rs = await split(dir, 'resnet18', resnet18({ weights: 'random', seed: 7 }), (p) => cutsAtFractions(p, [0.25, 0.5, 0.75]));
    const resnet = await pair('ResNet-18', rs.file, rs.split, [1, 3, 224, 224], 40, 4);
    const rep = await benchReplay(dir, 1000, 5);
    return { resnet, cnn, ...(fixture && { fixture }), replay: rep };
  } finally { fs.rmSync(dir, { recursive: true, force: true }); }
}

// Run as its own process from bench/run.ts: prints the figures as JSON.
if (process.argv[1] && path.resolve(process.argv[1]) === fileURLToPath(import.meta.url)) process.stdout.write(JSON.stringify(await benchChain()));

// Stream tuning of a 100 000-frame recording against one pass of the chain over it. The model is the
// committed Fashion-MNIST CNN (test/fixtures/fmnist/cnn.onnx, 1.9 M MACs) with four linear exit heads
// distilled on synthetic images; the recording is synthetic too (INVENTED: blobs of light on a dark field,
// no dataset behind them): scenes of 20–200 frames of one image with small noise and a one-pixel shift now
// and then, labelled with the full model's answer on the scene's clean image, one segment id per scene.
// Measured: one pass of the chain over every frame on one thread (what capture cost before threads), and
// what `tune --stream` runs (lib/cli/tune.ts): the capture on every core, the per-frame tuning that gives
// `then`, the stream search and its certification; with labels and segments, and without either.
// Prints one JSON line; bench/run.ts prints it with the goal (≤ 2 × the pass).
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { main } from '../lib/cli/main.js';
import { writeNpy } from '../lib/data/npy.js';
import { mulberry32 } from '../lib/graph/build.js';
import { loadChain } from '../lib/run/chain.js';
import { captureCache } from '../lib/tune/chain-capture.js';
import { fullAnswers } from '../lib/tune/scenes.js';
import { tune } from '../lib/tune/search.js';
import { tuneStreamThreaded } from '../lib/tune/stream-threads.js';
import type { FramePolicy } from '../lib/policy/index.js';

export interface StreamRun { captureMs: number; threads: number; frameMs: number; searchMs: number; certifyMs: number; totalMs: number; settings: number; scenes: number; saving: number; certified: boolean }
export interface StreamBench { frames: number; passMs: number; labelled: StreamRun; unlabelled: StreamRun }

const FIXTURE = path.join(path.dirname(fileURLToPath(import.meta.url)), '..', '..', 'test', 'fixtures', 'fmnist', 'cnn.onnx');
const CUTS = '/b1/b1.2/MaxPool_output_0,/b2/b2.0/Conv_output_0,/b2/b2.2/MaxPool_output_0,/b3/b3.0/Conv_output_0';
const F = 100_000, PROTOS = 600, PX = 28 * 28;

/** An invented image: two to four soft blobs. */
function proto(rnd: () => number, out: Float32Array, at: number): void {
  const blobs = Array.from({ length: 2 + Math.floor(rnd() * 3) }, () => ({ x: 4 + rnd() * 20, y: 4 + rnd() * 20, s: 2 + rnd() * 6, a: 0.4 + rnd() * 0.6 }));
  for (let r = 0; r < 28; r++) for (let c = 0; c < 28; c++) {
    let v = 0;
    for (const b of blobs) v += b.a * Math.exp(-((c - b.x) ** 2 + (r - b.y) ** 2) / (2 * b.s * b.s));
    out[at + r * 28 + c] = Math.min(1, v);
  }
}

/** A command run in this process, its printout kept off stdout (which carries the one JSON line). */
async function cli(args: string[]): Promise<void> {
  const write = process.stdout.write;
  process.stdout.write = (() => true) as typeof process.stdout.write;
  let code: number;
  try { code = await main(args); } finally { process.stdout.write = write; }
  if (code !== 0) throw new Error(`offramp ${args.join(' ')} exited ${code}`);
}

async function run(dir: string, split: string, rec: string, labels?: Int32Array, segments?: Int32Array): Promise<StreamRun> {
  const chain = await loadChain(split);
  try {
    const t0 = performance.now();
    const { cache, layout, threads } = await captureCache(chain, rec, labels);
    const t1 = performance.now();
    const frame = tune(cache, layout.costs, { maxDrop: 1, grid: 32, kinds: ['confidence'] });
    const then = frame.chosen.policy.thresholds.some((t) => t !== null) ? [frame.chosen.policy as FramePolicy] : [];
    const t2 = performance.now();
    const ph: Record<string, number> = {};
    const r = await tuneStreamThreaded(cache, layout.costs, { maxDrop: 1, grid: 24, then, segments, onPhase: (p, ms) => { ph[p] = ms; } });
    const t3 = performance.now();
    return {
      captureMs: t1 - t0, threads, frameMs: t2 - t1, searchMs: ph.search, certifyMs: ph.certify, totalMs: t3 - t0, settings: r.settings,
      scenes: r.scenes.tune + r.scenes.held, saving: 1 - r.chosen.held.meanMacs / r.full.held.meanMacs, certified: r.guarantee.certified,
    };
  } finally { await chain.release(); }
}

const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-bench-stream-'));
try {
  const rnd = mulberry32(11);
  const protos = new Float32Array(PROTOS * PX);
  for (let p = 0; p < PROTOS; p++) proto(rnd, protos, p * PX);
  const noisy = (src: number, dx: number, dy: number, out: Float32Array, at: number) => {
    for (let r = 0; r < 28; r++) for (let c = 0; c < 28; c++) {
      const sx = c - dx, sy = r - dy;
      const v = sx >= 0 && sx < 28 && sy >= 0 && sy < 28 ? protos[src * PX + sy * 28 + sx] : 0;
      out[at + r * 28 + c] = Math.min(1, Math.max(0, v + 0.02 * (rnd() - 0.5)));
    }
  };
  // heads distilled on 3000 noisy images of the prototypes (no labels: they learn the full model's answers)
  const fit = new Float32Array(3000 * PX);
  for (let i = 0; i < 3000; i++) noisy(Math.floor(rnd() * PROTOS), Math.floor(rnd() * 3) - 1, Math.floor(rnd() * 3) - 1, fit, i * PX);
  writeNpy(path.join(dir, 'fit.npy'), fit, [3000, 1, 28, 28]);
  writeNpy(path.join(dir, 'protos.npy'), protos, [PROTOS, 1, 28, 28]);
  await cli(['graft', FIXTURE, '--cuts', CUTS, '--head', 'linear', '--data', path.join(dir, 'fit.npy'), '-o', path.join(dir, 'g.onnx')]);
  const split = path.join(dir, 'split');
  await cli(['split', path.join(dir, 'g.onnx'), '-o', split]);
  const chain = await loadChain(split);
  const protoAnswer = fullAnswers((await captureCache(chain, path.join(dir, 'protos.npy'), undefined, undefined, { threads: 1 })).cache);
  // the recording
  const x = new Float32Array(F * PX), y = new Int32Array(F), seg = new Int32Array(F);
  for (let i = 0, id = 0; i < F; id++) {
    const src = Math.floor(rnd() * PROTOS), len = 20 + Math.floor(rnd() * 181);
    let dx = 0, dy = 0;
    for (let f = 0; f < len && i < F; f++, i++) {
      if (rnd() < 0.25) { dx = Math.floor(rnd() * 3) - 1; dy = Math.floor(rnd() * 3) - 1; }
      noisy(src, dx, dy, x, i * PX);
      y[i] = protoAnswer[src]; seg[i] = id;
    }
  }
  const rec = path.join(dir, 'rec.npy');
  writeNpy(rec, x, [F, 1, 28, 28]);
  // one pass of the chain over the recording, one frame at a time on this thread
  const t0 = performance.now();
  await captureCache(chain, rec, undefined, undefined, { threads: 1 });
  const passMs = performance.now() - t0;
  await chain.release();
  const labelled = await run(dir, split, rec, y, seg);
  const unlabelled = await run(dir, split, rec);
  const out: StreamBench = { frames: F, passMs, labelled, unlabelled };
  process.stdout.write(JSON.stringify(out) + '\n');
} finally {
  fs.rmSync(dir, { recursive: true, force: true });
}

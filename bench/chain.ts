// Staged chain vs the whole model in onnxruntime-node: ResNet-18 split in 4 stages
// at the clean cuts nearest 25/50/75 % of the MACs, batch 1, the same input, runs
// interleaved (whole, chain, whole, …) so drift hits both alike; medians compared.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { resnet18 } from '../test/helpers/nets.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { mulberry32 } from '../lib/graph/build.js';
import { cutsAtFractions, scanModel } from '../lib/cuts/scan.js';
import { writeSplit } from '../lib/split/manifest.js';
import { loadChain } from '../lib/run/chain.js';
import { openSession, randomTensor, runSession } from '../lib/runtime/ort.js';

export interface ChainBench { stages: number; wholeMs: number; chainMs: number; ratio: number; runs: number }

const median = (xs: number[]) => { const s = [...xs].sort((a, b) => a - b); return s[s.length >> 1]; };

export async function benchChain(runs = 40, warmup = 5): Promise<ChainBench> {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-bench-chain-'));
  try {
    const file = path.join(dir, 'resnet18.onnx');
    saveModel(resnet18({ weights: 'random', seed: 7 }), file);
    const plan = await scanModel(loadModel(file));
    writeSplit(plan, cutsAtFractions(plan, [0.25, 0.5, 0.75]), path.join(dir, 'split'), file);
    const chain = await loadChain(path.join(dir, 'split'));
    const whole = await openSession(fs.readFileSync(file), file);
    const feeds = { input: randomTensor({ dtype: FLOAT, shape: [1, 3, 224, 224] }, mulberry32(1)) };
    const w: number[] = [], c: number[] = [];
    try {
      for (let i = 0; i < warmup + runs; i++) {
        let t = process.hrtime.bigint();
        await runSession(whole, feeds);
        const tw = Number(process.hrtime.bigint() - t) / 1e6;
        t = process.hrtime.bigint();
        await chain.run(feeds);
        const tc = Number(process.hrtime.bigint() - t) / 1e6;
        if (i >= warmup) { w.push(tw); c.push(tc); }
      }
    } finally { await whole.release(); await chain.release(); }
    const wholeMs = median(w), chainMs = median(c);
    return { stages: chain.manifest.stages.length, wholeMs, chainMs, ratio: chainMs / wholeMs, runs };
  } finally { fs.rmSync(dir, { recursive: true, force: true }); }
}

// Run as its own process from bench/run.ts: prints the figures as JSON.
if (process.argv[1] && path.resolve(process.argv[1]) === fileURLToPath(import.meta.url)) process.stdout.write(JSON.stringify(await benchChain()));

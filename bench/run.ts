// `npm run bench`: figures measured in one run, printed with their targets.
// Each measurement runs in a fresh child process so peak RSS is its own.
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { resnet50 } from '../test/helpers/nets.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { analyzeModel } from '../lib/cost/analyze.js';
import { main } from '../lib/cli/main.js';

const self = fileURLToPath(import.meta.url);

async function child(kind: string, file: string): Promise<void> {
  const t0 = process.hrtime.bigint();
  const out: Record<string, number> = {};
  if (kind === 'cli') {
    const code = await main(['cost', file, '--json', '-o', path.join(path.dirname(file), 'cost.json')]);
    if (code !== 0) throw new Error(`offramp cost exited ${code}`);
  } else {
    const m = loadModel(file);
    out.decodeMs = Number(process.hrtime.bigint() - t0) / 1e6;
    const t1 = process.hrtime.bigint();
    const r = await analyzeModel(m);
    out.costMs = Number(process.hrtime.bigint() - t1) / 1e6;
    out.macs = Number(r.model.macs);
  }
  out.totalMs = Number(process.hrtime.bigint() - t0) / 1e6;
  out.maxRssBytes = process.resourceUsage().maxRSS * 1024;
  process.stdout.write(JSON.stringify(out));
}

function run(kind: string, file: string): Record<string, number> {
  const r = spawnSync(process.execPath, [self, '--child', kind, file], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`bench child ${kind} failed: ${r.stderr}`);
  return JSON.parse(r.stdout);
}

const line = (name: string, value: string, target = '') => console.log(`${name.padEnd(34)} ${value.padStart(14)}  ${target}`);

async function parent(): Promise<void> {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-bench-'));
  try {
    const file = path.join(dir, 'resnet50.onnx');
    const t0 = Date.now();
    saveModel(resnet50({ weights: 'random', seed: 7 }), file);
    const size = fs.statSync(file).size;
    console.log(`ResNet-50-sized model: ${(size / 2 ** 20).toFixed(1)} MiB, built and written in ${Date.now() - t0} ms\n`);
    console.log('offramp cost');
    const parts = run('parts', file);
    const cli = run('cli', file);
    line('decode (loadModel)', `${parts.decodeMs.toFixed(1)} ms`);
    line('cost report (analyzeModel)', `${parts.costMs.toFixed(1)} ms`);
    line('whole `offramp cost --json` run', `${cli.totalMs.toFixed(1)} ms`, `target < 1000 ms: ratio ${(cli.totalMs / 1000).toFixed(2)}`);
    line('peak RSS of that run', `${(cli.maxRssBytes / 2 ** 20).toFixed(1)} MiB`, `target < 2× file: ratio ${(cli.maxRssBytes / size).toFixed(2)}`);
    line('MACs counted', `${parts.macs}`);
  } finally {
    fs.rmSync(dir, { recursive: true, force: true });
  }
}

if (process.argv[2] === '--child') await child(process.argv[3], process.argv[4]);
else await parent();

// `npm run bench` part: the whole int8 network as emit-c writes it, on the demo model and the
// Fashion-MNIST CNN fixture: instructions per MAC and per decision on the emulated cores (exact
// counts), and on the host, gcc -O2's time per frame against onnxruntime running the same QDQ stage
// files. Prints JSON for bench/run.ts; {"skipped": "<why>"} where the toolchain or data is missing.
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { main } from '../lib/cli/main.js';
import { writeNpy } from '../lib/data/npy.js';
import { measureDevice } from '../lib/measure/device.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import { firmwareFiles } from '../lib/firmware/write.js';
import { loadChain } from '../lib/run/chain.js';
import { readManifestFile } from '../lib/split/read.js';
import { readNpy } from '../lib/data/npy.js';
import { tensorFromData } from '../lib/runtime/ort.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { haveFmnist, loadFmnist } from '../test/helpers/fmnist.js';

const HERE = path.dirname(fileURLToPath(import.meta.url));
const ROOT = [path.join(HERE, '..'), path.join(HERE, '..', '..')].find((d) => fs.existsSync(path.join(d, 'models-demo', 'fan-monitor.onnx')))!;
const DRIVER = path.join(ROOT, 'test', 'helpers', 'c', 'firmware_main.c');

export interface FirmwareBench {
  model: string; macs: number; classes: number;
  cores: { core: string; fullPerMac: number; policyPerFrame: number; fullPerFrame: number; decisionPerFrame: number; decisionsPerFrame: number }[];
  host?: { frames: number; firmwareUsPerFrame: number; onnxruntimeUsPerFrame: number; ratio: number };
}

async function run(args: string[]): Promise<void> {
  const code = await main(args);
  if (code !== 0) throw new Error(`offramp ${args[0]} exited ${code}`);
}

/** The quantized folder of each model, with a tuned policy. */
async function folders(dir: string): Promise<{ name: string; q: string; x: string; per: number }[]> {
  const out = [];
  const c = samples(3000, 202), v = samples(400, 303);
  writeNpy(path.join(dir, 'dx.npy'), c.x, [3000, 1, BINS, FRAMES]); writeNpy(path.join(dir, 'dy.npy'), c.y, [3000]);
  writeNpy(path.join(dir, 'dv.npy'), v.x, [400, 1, BINS, FRAMES]);
  await run(['build', path.join(ROOT, 'models-demo', 'fan-monitor.onnx'), '--data', path.join(dir, 'dx.npy'), '--labels', path.join(dir, 'dy.npy'), '--head', 'grid:4', '--target', 'm4f', '--int8', '-o', path.join(dir, 'demo')]);
  out.push({ name: 'demo model (fan-monitor)', q: path.join(dir, 'demo', 'int8'), x: path.join(dir, 'dv.npy'), per: BINS * FRAMES });
  if (haveFmnist) {
    const per = 784, tr = loadFmnist('train', 4500), te = loadFmnist('test', 400);
    const put = (n: string, a: Float32Array | Int32Array, d: number[]) => writeNpy(path.join(dir, n), a, d);
    put('ff.npy', tr.images.slice(0, 2000 * per), [2000, 1, 28, 28]); put('ffy.npy', Int32Array.from(tr.labels.subarray(0, 2000)), [2000]);
    put('fc.npy', tr.images.slice(2000 * per, 2500 * per), [500, 1, 28, 28]);
    put('ft.npy', tr.images.slice(2500 * per, 4500 * per), [2000, 1, 28, 28]); put('fty.npy', Int32Array.from(tr.labels.subarray(2500, 4500)), [2000]);
    put('fv.npy', te.images, [400, 1, 28, 28]);
    const f = (n: string) => path.join(dir, n);
    await run(['graft', path.join(ROOT, 'test', 'fixtures', 'fmnist', 'cnn.onnx'), '--cuts', '/b1/b1.2/MaxPool_output_0,/b2/b2.2/MaxPool_output_0', '--head', 'grid:4', '--data', f('ff.npy'), '--labels', f('ffy.npy'), '-o', f('fg.onnx')]);
    await run(['split', f('fg.onnx'), '-o', f('fs')]);
    await run(['quantize', f('fs'), '--data', f('fc.npy'), '-o', f('fq')]);
    await run(['tune', f('fq'), '--data', f('ft.npy'), '--labels', f('fty.npy'), '--max-drop', '2']);
    out.push({ name: 'Fashion-MNIST CNN', q: f('fq'), x: f('fv.npy'), per });
  }
  return out;
}

async function hostTiming(q: string, x: string, per: number, dir: string): Promise<FirmwareBench['host']> {
  const src = path.join(dir, `host-${path.basename(path.dirname(q))}-${path.basename(q)}`);
  fs.mkdirSync(src);
  for (const f of firmwareFiles(q, src).files) fs.writeFileSync(path.join(src, f.name), f.text);
  const exe = path.join(src, 'fw');
  const cc = spawnSync('gcc', ['-std=c99', '-O2', '-I', src, ...fs.readdirSync(src).filter((f) => f.endsWith('.c')).map((f) => path.join(src, f)), DRIVER, '-o', exe], { encoding: 'utf8' });
  if (cc.status !== 0) throw new Error(cc.stderr);
  const data = readNpy(x).data as Float32Array;
  const frames = data.length / per;
  // the whole network each frame (the driver's full mode)
  const buf = Buffer.from(data.buffer, data.byteOffset, data.byteLength);
  const best = (f: () => number) => Math.min(f(), f(), f());
  const fwUs = best(() => { const t = process.hrtime.bigint(); spawnSync(exe, ['full'], { input: buf, maxBuffer: 1 << 30 }); return Number(process.hrtime.bigint() - t) / 1e3 / frames; });
  const chain = await loadChain(q);
  const shape = chain.manifest.inputs[0].shape.map(Number), name = chain.manifest.inputs[0].name;
  let ortUs = Infinity;
  for (let rep = 0; rep < 3; rep++) {
    const t = process.hrtime.bigint();
    for (let i = 0; i < frames; i++) await chain.run({ [name]: tensorFromData(1, shape, data.subarray(i * per, (i + 1) * per)) });
    ortUs = Math.min(ortUs, Number(process.hrtime.bigint() - t) / 1e3 / frames);
  }
  await chain.release();
  return { frames, firmwareUsPerFrame: fwUs, onnxruntimeUsPerFrame: ortUs, ratio: fwUs / ortUs };
}

const status = toolchainStatus();
if (!status.ready) console.log(JSON.stringify({ skipped: status.message }));
else {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-bench-fw-'));
  try {
    const out: FirmwareBench[] = [];
    for (const m of await folders(dir)) {
      const b: FirmwareBench = { model: m.name, macs: 0, classes: 0, cores: [] };
      for (const core of ['m4f', 'm7', 'm55']) {
        const r = await measureDevice({ dir: m.q, data: m.x, core, rows: 40 });
        b.macs = r.stages.reduce((a, s) => a + s.macs, 0);
        b.classes = readManifestFile(m.q).manifest.outputs[0].shape.map(Number).reduce((a, d) => a * d, 1);
        const made = r.decisions.reduce((a, d) => a + d.count, 0);
        const decisionTotal = r.decisions.reduce((a, d) => a + d.count * d.meanInstructions, 0);
        b.cores.push({ core, fullPerMac: r.perFrame.full / b.macs, policyPerFrame: r.perFrame.policy, fullPerFrame: r.perFrame.full, decisionPerFrame: decisionTotal / r.frames, decisionsPerFrame: made / r.frames });
      }
      b.host = await hostTiming(m.q, m.x, m.per, dir);
      out.push(b);
    }
    console.log(JSON.stringify(out));
  } finally { fs.rmSync(dir, { recursive: true, force: true }); }
}

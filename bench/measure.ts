// `npm run bench` part: instructions per MAC of plain C int8 and float32 3×3 convolutions on the
// emulated cores (exact counts from the counter plugin), and the emulator's speed with the counter on.
// Prints JSON for bench/run.ts; prints {"skipped": "<why>"} without the toolchain. scripts/measure-rates.ts
// takes its float32 rate from `convBench` (the firmware has no float kernels: a plain C one stands in).
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { measureFirmware, toolchainStatus, type MeasuredCore } from '../lib/measure/index.js';

const HERE = path.dirname(fileURLToPath(import.meta.url));
// The C sits in the source tree (bench/measure/), also when this runs from dist/bench/.
const SRC = [path.join(HERE, 'measure'), path.join(HERE, '..', '..', 'bench', 'measure')];

export interface ConvBench {
  core: MeasuredCore;
  macs: number;
  /** int8 convolution (stage 0). */
  instructions: number;
  perMac: number;
  /** float32 convolution (stage 1). */
  floatInstructions: number;
  floatPerMac: number;
  /** Wall time of building the firmware, of one emulated run (1 frame), and of one more frame. */
  buildMs: number;
  runMs: number;
  frameMs: number;
  /** Guest instructions per second of emulation with the counter on. */
  emulatedPerSec: number;
}

// 16×16×8 input, 16 output channels, valid 3×3: 14 × 14 × 16 outputs of 9 × 8 MACs.
const MACS = 14 * 14 * 16 * 9 * 8;
const EXTRA = 200;

/** The two convolutions measured on `core`: exact instructions, per MAC, and the emulator's speed. */
export async function convBench(core: MeasuredCore): Promise<ConvBench> {
  const dir = SRC.find((d) => fs.existsSync(path.join(d, 'conv3x3.c')));
  if (!dir) throw new Error('bench/measure/conv3x3.c is missing');
  const opts = { core, sources: [path.join(dir, 'conv3x3.c'), path.join(dir, 'conv3x3f.c')], driverSources: [path.join(dir, 'driver.c')], timings: true };
  const one = await measureFirmware(opts);
  const many = await measureFirmware({ ...opts, defines: [`BENCH_FRAMES=${1 + EXTRA}`] });
  const stage = (m: typeof one, k: number) => {
    const r = m.regions.find((x) => x.kind === 'stage' && x.index === k);
    if (!r) throw new Error(`${core}: no count for stage ${k}`);
    return r;
  };
  const conv = stage(one, 0), convf = stage(one, 1);
  for (const [a, b] of [[conv, stage(many, 0)], [convf, stage(many, 1)]] as const) {
    if (b.count !== 1 + EXTRA || b.min !== a.total || b.max !== a.total) throw new Error(`${core}: a convolution's count varies between frames`);
  }
  const frameMs = (many.timings!.emulateMs - one.timings!.emulateMs) / EXTRA;
  return {
    core, macs: MACS, instructions: conv.total, perMac: conv.total / MACS, floatInstructions: convf.total, floatPerMac: convf.total / MACS, buildMs: one.timings!.buildMs, runMs: one.timings!.emulateMs, frameMs,
    emulatedPerSec: (many.instructions - one.instructions) / EXTRA / (frameMs / 1000),
  };
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  const status = toolchainStatus();
  if (!status.ready) console.log(JSON.stringify({ skipped: status.message }));
  else {
    const out: ConvBench[] = [];
    for (const core of ['m4f', 'm7', 'm55'] as const) out.push(await convBench(core));
    console.log(JSON.stringify(out));
  }
}

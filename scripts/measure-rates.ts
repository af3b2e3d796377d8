// The built-in target profiles' MAC rates, measured with the project's own kernels on the emulated
// cores: `npm run build && node dist/scripts/measure-rates.js` writes lib/chip/measured-rates.json,
// which lib/chip/target.ts reads. Run it again when the kernels, the compiler flags or the
// cycles-per-instruction estimates (lib/measure/device.ts) change; test/rates.test.ts re-measures
// one core and fails when the committed file no longer matches.
//
// int8: the whole int8 network of two models, as a user makes it (graft → split → quantize) and as
// `offramp measure` runs it (the firmware of lib/firmware, every stage on every frame):
// instructions per MAC = Σ stage instructions / Σ stage MACs (exit heads included, as the budget
// counts them; the frame's input quantization and final argmax are outside the stages). The profile
// takes the slower of the two networks, so a projection is not optimistic for either.
// float32: the firmware has no float kernels, so the rate is that of a plain C 3×3 convolution
// (bench/measure.ts), gcc -O2 with the core's FPU.
// MAC/cycle = 1 / (instructions per MAC × cycles per instruction); the instruction counts are exact,
// the cycles per instruction an estimate (CYCLES_PER_INSTRUCTION, stated in the file).
// m0plus has no QEMU machine: its figures stay from memory (lib/chip/target.ts).
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { writeNpy } from '../lib/data/npy.js';
import { writeAtomic } from '../lib/util/atomic.js';
import { readManifestFile } from '../lib/split/read.js';
import { fullModel } from '../lib/policy/policy.js';
import { CYCLES_PER_INSTRUCTION, measureDevice } from '../lib/measure/device.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import type { MeasuredCore } from '../lib/measure/cores.js';
import { RATES_SCHEMA, macsPerCycleText, type MeasuredRates, type NetworkRate } from '../lib/chip/rates.js';
import { convBench } from '../bench/measure.js';
import { samples, BINS, FRAMES } from './demo-data.js';
import { loadFmnist, haveFmnist } from '../test/helpers/fmnist.js';

const HERE = path.dirname(fileURLToPath(import.meta.url));
/** The checkout's root: where package.json is, from scripts/ or from dist/scripts/. */
export const ROOT = [path.join(HERE, '..'), path.join(HERE, '..', '..')].find((d) => fs.existsSync(path.join(d, 'package.json')) && fs.existsSync(path.join(d, 'lib', 'chip')))!;
export const RATES_FILE = path.join(ROOT, 'lib', 'chip', 'measured-rates.json');
export const CORES: MeasuredCore[] = ['m4f', 'm7', 'm55'];
/** Frames measured per network: each runs every stage (the whole-network policy), and stage counts are exact. */
export const ROWS = 4;

export interface Network { name: 'fan-monitor' | 'fmnist-cnn'; model: string; dir: string; data: string }

function offramp(args: string[]): void {
  const r = spawnSync(process.execPath, [path.join(ROOT, 'bin', 'offramp.js'), ...args], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`offramp ${args[0]}: ${r.stderr.trim()}`);
}

/** A quantized folder of a model, as a user makes one: exits grafted, split, int8 on calibration rows. */
function quantized(tmp: string, name: Network['name'], model: string, graft: string[], fit: [Float32Array, ArrayLike<number | bigint>, number[]], calib: [Float32Array, number[]], rows: [Float32Array, number[]]): Network {
  const f = (n: string) => path.join(tmp, `${name}-${n}`);
  writeNpy(f('fit.npy'), fit[0], fit[2]);
  writeNpy(f('fit-y.npy'), Int32Array.from(fit[1], Number), [fit[2][0]]);
  writeNpy(f('calib.npy'), calib[0], calib[1]);
  writeNpy(f('rows.npy'), rows[0], rows[1]);
  offramp(['graft', model, ...graft, '--data', f('fit.npy'), '--labels', f('fit-y.npy'), '-o', f('grafted.onnx')]);
  offramp(['split', f('grafted.onnx'), '-o', f('split')]);
  offramp(['quantize', f('split'), '--data', f('calib.npy'), '-o', f('q')]);
  return { name, model: path.relative(ROOT, model), dir: f('q'), data: f('rows.npy') };
}

/** The demo model (invented scenario, scripts/demo-data.ts), quantized in `tmp`. */
export function demoNetwork(tmp: string): Network {
  const fit = samples(2000, 101), cal = samples(500, 202), rows = samples(ROWS, 303);
  const shape = (n: number) => [n, 1, BINS, FRAMES];
  return quantized(tmp, 'fan-monitor', path.join(ROOT, 'models-demo', 'fan-monitor.onnx'), ['--at', '30%,60%'],
    [fit.x, fit.y, shape(2000)], [cal.x, shape(500)], [rows.x, shape(ROWS)]);
}

/** The Fashion-MNIST CNN fixture (Debian's dataset-fashion-mnist), quantized in `tmp`. */
export function fmnistNetwork(tmp: string): Network {
  if (!haveFmnist) throw new Error('Fashion-MNIST is missing: apt-get install dataset-fashion-mnist');
  const per = 28 * 28, train = loadFmnist('train', 2500), test = loadFmnist('test', ROWS);
  const shape = (n: number) => [n, 1, 28, 28];
  return quantized(tmp, 'fmnist-cnn', path.join(ROOT, 'test', 'fixtures', 'fmnist', 'cnn.onnx'), ['--cuts', '/b1/b1.2/MaxPool_output_0,/b2/b2.2/MaxPool_output_0'],
    [train.images.slice(0, 2000 * per), train.labels.subarray(0, 2000), shape(2000)], [train.images.slice(2000 * per, 2500 * per), shape(500)], [test.images.slice(0, ROWS * per), shape(ROWS)]);
}

/** The whole int8 network of `net` on `core`: Σ stage instructions over Σ stage MACs. */
export async function measureNetwork(net: Network, core: MeasuredCore): Promise<NetworkRate> {
  const exits = readManifestFile(net.dir).manifest.stages.reduce((a, s) => a + s.exits.length, 0);
  const r = await measureDevice({ dir: net.dir, data: net.data, core, rows: ROWS, policy: { value: fullModel(exits), from: 'the whole network on every frame' } });
  if (r.answers.equalToReference !== r.frames) throw new Error(`${net.name} on ${core}: the firmware differs from the TypeScript reference`);
  const macs = r.stages.reduce((a, s) => a + s.macs, 0), instructions = r.stages.reduce((a, s) => a + s.instructions, 0);
  return { network: net.name, model: net.model, core, macs, instructions, instructionsPerMac: round4(instructions / macs) };
}

const round4 = (x: number) => Math.round(x * 10000) / 10000;

/** The rates file from the measured rows: per core the slower int8 network, and the float32 convolution. */
export function ratesFrom(int8: NetworkRate[], float32: { core: MeasuredCore; macs: number; instructions: number }[]): MeasuredRates {
  const cores = {} as MeasuredRates['cores'];
  for (const core of CORES) {
    const cpi = CYCLES_PER_INSTRUCTION[core];
    const mine = int8.filter((r) => r.core === core);
    const f = float32.find((r) => r.core === core);
    if (!mine.length || !f) throw new Error(`no measurement for ${core}`);
    const slowest = mine.reduce((a, b) => (b.instructionsPerMac > a.instructionsPerMac ? b : a));
    const fpm = round4(f.instructions / f.macs);
    cores[core] = {
      cyclesPerInstruction: cpi,
      int8: { instructionsPerMac: slowest.instructionsPerMac, macsPerCycle: macsPerCycleText(slowest.instructionsPerMac, cpi), from: slowest.network },
      float32: { instructionsPerMac: fpm, macsPerCycle: macsPerCycleText(fpm, cpi), from: 'plain C 3×3 convolution (bench/measure/conv3x3f.c)' },
    };
  }
  return {
    schema: RATES_SCHEMA,
    basis: 'instructions counted exactly under QEMU 7.2 with the counter plugin; MAC/cycle = 1 / (instructions per MAC × cycles per instruction), the cycles per instruction an estimate (no wait states)',
    int8: int8.slice().sort((a, b) => CORES.indexOf(a.core) - CORES.indexOf(b.core) || a.network.localeCompare(b.network)),
    float32: float32.map((r) => ({ core: r.core, kernel: 'bench/measure/conv3x3f.c', macs: r.macs, instructions: r.instructions, instructionsPerMac: round4(r.instructions / r.macs) })),
    cores,
  };
}

async function main(): Promise<void> {
  const status = toolchainStatus();
  if (!status.ready) throw new Error(status.message);
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-rates-'));
  try {
    const nets = [demoNetwork(tmp), fmnistNetwork(tmp)];
    const int8: NetworkRate[] = [], float32: { core: MeasuredCore; macs: number; instructions: number }[] = [];
    for (const core of CORES) {
      for (const n of nets) {
        const r = await measureNetwork(n, core);
        process.stderr.write(`${core} ${n.name}: ${r.instructions} instructions for ${r.macs} MACs, ${r.instructionsPerMac} per MAC\n`);
        int8.push(r);
      }
      const c = await convBench(core);
      float32.push({ core, macs: c.macs, instructions: c.floatInstructions });
    }
    const rates = ratesFrom(int8, float32);
    writeAtomic(RATES_FILE, JSON.stringify(rates, null, 2) + '\n');
    for (const core of CORES) {
      const c = rates.cores[core];
      process.stdout.write(`${core}: int8 ${c.int8.instructionsPerMac} instructions/MAC → ${c.int8.macsPerCycle} MAC/cycle; float32 ${c.float32.instructionsPerMac} → ${c.float32.macsPerCycle} (CPI ${c.cyclesPerInstruction})\n`);
    }
    process.stdout.write(`written ${path.relative(process.cwd(), RATES_FILE)}\n`);
  } finally {
    fs.rmSync(tmp, { recursive: true, force: true });
  }
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) await main();

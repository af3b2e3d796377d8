// `npm run bench`: figures measured in one run, printed with their targets.
// Each measurement runs in a fresh child process (bench/child.ts) so peak RSS is its own.
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import type { ChainBench, ChainPair } from './chain.js';
import type { ConvBench } from './measure.js';
import type { FirmwareBench } from './firmware.js';
import type { StreamBench, StreamRun } from './stream.js';
import { BUILTIN_TARGETS, FROM_MEMORY_RATES, ratioText } from '../lib/chip/target.js';
import { readMeasuredRates } from '../lib/chip/rates.js';

const CHILD = path.join(path.dirname(fileURLToPath(import.meta.url)), 'child.js');

function run(kind: string, file: string): Record<string, number> {
  const r = spawnSync(process.execPath, [CHILD, kind, file, path.join(path.dirname(file), 'cost.json')], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`bench child ${kind} failed: ${r.stderr}`);
  return JSON.parse(r.stdout);
}

const line = (name: string, value: string, target = '') => console.log(`${name.padEnd(34)} ${value.padStart(14)}  ${target}`);

async function parent(): Promise<void> {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-bench-'));
  try {
    const file = path.join(dir, 'resnet50.onnx');
    const made = run('make', file);
    const size = fs.statSync(file).size;
    console.log(`ResNet-50-sized model: ${(size / 2 ** 20).toFixed(1)} MiB, built and written in ${made.totalMs.toFixed(0)} ms\n`);
    console.log('offramp cost');
    const parts = run('parts', file);
    const cli = run('cli', file);
    line('decode, bytes already in memory', `${parts.decodeOnlyMs.toFixed(1)} ms`, 'weights stay views into the buffer');
    line('loadModel (read, decode, IR, checks)', `${parts.decodeMs.toFixed(1)} ms`);
    line('cost report (analyzeModel)', `${parts.costMs.toFixed(1)} ms`);
    line('whole `offramp cost --json` run', `${cli.totalMs.toFixed(1)} ms`, `target < 1000 ms: ratio ${(cli.totalMs / 1000).toFixed(2)}`);
    line('peak RSS of that run', `${(cli.maxRssBytes / 2 ** 20).toFixed(1)} MiB`, `target < 2× file: ratio ${(cli.maxRssBytes / size).toFixed(2)}`);
    line('MACs counted', `${parts.macs}`);
    const npy = run('npy', path.join(dir, 'big.npy'));
    console.log('\ncalibration data read in batches');
    line(`peak RSS growth, ${(npy.fileBytes / 2 ** 20).toFixed(0)} MiB .npy`, `${(npy.rssGrowthBytes / 2 ** 20).toFixed(1)} MiB`, `target: independent of the file; ratio to the file ${(npy.rssGrowthBytes / npy.fileBytes).toFixed(3)}`);
    const chainRun = spawnSync(process.execPath, [path.join(path.dirname(CHILD), 'chain.js')], { encoding: 'utf8' });
    if (chainRun.status !== 0) throw new Error(`bench chain failed: ${chainRun.stderr}`);
    const ch = JSON.parse(chainRun.stdout) as ChainBench;
    const pairLines = (p: ChainPair, target: number, note = '') => {
      console.log(`\n${p.model}: ${(p.macs / 1e6).toFixed(2)} M MACs in ${p.stages} stages, batch 1, ${p.runs} interleaved rounds, medians per frame${note}`);
      line('whole model', `${p.wholeMs.toFixed(3)} ms`);
      line('staged chain (loadChain().run)', `${p.chainMs.toFixed(3)} ms`, `target ratio ≤ ${target.toFixed(2)}: ratio ${p.ratio.toFixed(3)}`);
      line('both via awaited session API', `${p.wholeApiMs.toFixed(3)} ms`, `chain ${p.chainApiMs.toFixed(3)} ms: ratio ${p.apiRatio.toFixed(3)} (the runner before)`);
    };
    console.log('\nstaged chain against the whole model (same runtime path; median of per-round ratios, rounds interleaved)');
    pairLines(ch.resnet, 1.1);
    pairLines(ch.cnn, 1.5);
    if (ch.fixture) pairLines(ch.fixture, 1.5, '; 4× fewer MACs than the target model, shown for reference');
    const r = ch.replay;
    console.log(`\nofframp replay (small CNN with 3 exit heads, ${r.frames} frames × ${r.reps}, interleaved with the whole model; confidence policy: ${r.meanStages.toFixed(2)} of ${r.stages} stages per frame; medians)`);
    line('replay frames / s', `${r.fps.toFixed(0)}`, `target ≥ whole model's rate ÷ 1.5: replay/whole ${r.ratio.toFixed(2)}, ratio to target ${(r.ratio * 1.5).toFixed(2)}`);
    line('whole model frames / s', `${r.wholeFps.toFixed(0)}`, 'one run per frame, no exits');
    const tuneRun = spawnSync(process.execPath, [path.join(path.dirname(CHILD), 'tune.js')], { encoding: 'utf8' });
    if (tuneRun.status !== 0) throw new Error(`bench tune failed: ${tuneRun.stderr}`);
    const tu = JSON.parse(tuneRun.stdout);
    console.log(`\nofframp tune (synthetic cache: ${tu.samples} samples, ${tu.exits} exits)`);
    line('settings evaluated / s', `${tu.evalPerSec.toFixed(0)}`, `target ≥ 10000: ratio ${(tu.evalPerSec / 10000).toFixed(2)}`);
    line('whole tune(): settings / s', `${tu.tunePerSec.toFixed(0)}`, `${tu.tuneSettings} settings in ${tu.tuneMs.toFixed(0)} ms`);
    streamSection();
    const arenaRun = spawnSync(process.execPath, [path.join(path.dirname(CHILD), 'arena.js')], { encoding: 'utf8' });
    if (arenaRun.status !== 0) throw new Error(`bench arena failed: ${arenaRun.stderr}`);
    const ar = JSON.parse(arenaRun.stdout);
    console.log(`
arena plan (EfficientNet-B0, ${ar.values} activations)`);
    line('whole model', `${ar.wholeMs.toFixed(2)} ms`, `target < 50 ms: ratio ${(ar.wholeMs / 50).toFixed(2)} (${ar.wholeMethod})`);
    line(`third quarter, ${ar.partValues} values`, `${ar.partMs.toFixed(2)} ms`, `target < 50 ms: ratio ${(ar.partMs / 50).toFixed(2)} (${ar.partMethod})`);
    measureSection();
    firmwareSection();
  } finally {
    fs.rmSync(dir, { recursive: true, force: true });
  }
}

// Stream tuning of a 100 000-frame recording against one pass of the chain over it (bench/stream.ts).
function streamSection(): void {
  const r = spawnSync(process.execPath, [path.join(path.dirname(CHILD), 'stream.js')], { encoding: 'utf8', maxBuffer: 1 << 24 });
  if (r.status !== 0) throw new Error(`bench stream failed: ${r.stderr}`);
  const b = JSON.parse(r.stdout.trim().split('\n').pop()!) as StreamBench;
  const s = (ms: number) => `${(ms / 1000).toFixed(1)} s`;
  console.log(`\nstream tuning (Fashion-MNIST fixture CNN, 4 linear exits, ${b.frames} synthetic frames; tune --stream's work, capture on ${b.labelled.threads} threads of ${os.availableParallelism()} cores)`);
  line('one pass of the chain, one thread', s(b.passMs), `${((b.passMs / b.frames) * 1000).toFixed(1)} µs per frame`);
  const runLines = (name: string, x: StreamRun) => {
    line(`tune --stream, ${name}`, s(x.totalMs), `goal ≤ 2 × the pass: ratio ${(x.totalMs / b.passMs).toFixed(2)}, ratio to goal ${(x.totalMs / b.passMs / 2).toFixed(2)}`);
    line('  capture/frame/search/certify', `${(x.captureMs / 1000).toFixed(1)}/${(x.frameMs / 1000).toFixed(1)}/${(x.searchMs / 1000).toFixed(1)}/${(x.certifyMs / 1000).toFixed(1)} s`,
      `${x.settings} settings, ${x.scenes} scenes; ${(x.saving * 100).toFixed(1)} % saved${x.certified ? '' : ' (nothing certified)'}`);
  };
  runLines('labels and segments', b.labelled);
  runLines('no labels', b.unlabelled);
}

// Exact instruction counts on the emulated cores (bench/measure.ts). A single-issue core (M4) needs at
// least one cycle per instruction, so MACs per instruction bounds its MACs per cycle from above; the
// dual-issue M7 can at most double it.
function measureSection(): void {
  const r = spawnSync(process.execPath, [path.join(path.dirname(CHILD), 'measure.js')], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`bench measure failed: ${r.stderr}`);
  const got = JSON.parse(r.stdout) as ConvBench[] | { skipped: string };
  console.log('\nplain C 3×3 convolutions on the emulated cores (16×16×8 → 14×14×16, gcc -O2; exact instruction counts)');
  if (!Array.isArray(got)) { console.log(`  skipped: ${got.skipped}`); return; }
  const rates = readMeasuredRates();
  for (const c of got) {
    const t = BUILTIN_TARGETS[c.core]!;
    const old = FROM_MEMORY_RATES[c.core]!, r = rates.cores[c.core];
    line(`${c.core} int8: instructions per MAC`, `${c.perMac.toFixed(3)}`, `${c.instructions} for ${c.macs} MACs; ${(1 / c.perMac).toFixed(3)} MAC/instruction`);
    line(`${c.core} float32: instructions per MAC`, `${c.floatPerMac.toFixed(3)}`, `${c.floatInstructions} for ${c.macs} MACs; ${(1 / c.floatPerMac).toFixed(3)} MAC/instruction`);
    line(`${c.core} profile rates (MAC/cycle)`, `${ratioText(t.int8MacsPerCycle)} / ${ratioText(t.macsPerCycle)}`,
      `int8 / float32, measured (whole int8 networks ${r.int8.instructionsPerMac}/MAC, the float conv ${r.float32.instructionsPerMac}/MAC, at ${r.cyclesPerInstruction} cycles per instruction, estimated); from memory they were ${old.int8} / ${old.float}`);
  }
  const m4 = got.find((c) => c.core === 'm4f')!;
  line('one measurement, m4f: build', `${m4.buildMs.toFixed(0)} ms`, 'compile and link with the harness');
  line('one measurement, m4f: QEMU run', `${m4.runMs.toFixed(0)} ms`, `1 frame; ${m4.frameMs.toFixed(2)} ms per more frame`);
  line('emulated instructions / s', `${(m4.emulatedPerSec / 1e6).toFixed(0)} M`, 'with the counter plugin on');
}

// The whole int8 network as emit-c writes it (bench/firmware.ts).
function firmwareSection(): void {
  const r = spawnSync(process.execPath, [path.join(path.dirname(CHILD), 'firmware.js')], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`bench firmware failed: ${r.stderr}`);
  const got = JSON.parse(r.stdout.trim().split('\n').pop()!) as FirmwareBench[] | { skipped: string };
  console.log('\nint8 firmware (emit-c on a quantized folder; exact instruction counts on the emulated cores, the whole network per frame)');
  if (!Array.isArray(got)) { console.log(`  skipped: ${got.skipped}`); return; }
  for (const b of got) {
    console.log(`${b.model}: ${(b.macs / 1e6).toFixed(2)} M MACs, ${b.classes} classes`);
    for (const c of b.cores) {
      const goal = b.model.startsWith('Fashion') && c.core === 'm4f';
      line(`${c.core}: instructions per MAC`, c.fullPerMac.toFixed(3), goal ? `goal ≤ 2.5: ratio ${(c.fullPerMac / 2.5).toFixed(2)}` : `${c.fullPerFrame} per frame; with the policy ${c.policyPerFrame}`);
      line(`${c.core}: decision instructions per frame`, c.decisionPerFrame.toFixed(0), `${c.decisionsPerFrame.toFixed(2)} decisions per frame${goal ? `; goal ≤ 1500: ratio ${(c.decisionPerFrame / 1500).toFixed(2)}` : ''}`);
    }
    if (b.host) line('host gcc -O2 / onnxruntime QDQ, per frame', `${b.host.firmwareUsPerFrame.toFixed(1)} µs`, `onnxruntime ${b.host.onnxruntimeUsPerFrame.toFixed(1)} µs: ratio ${b.host.ratio.toFixed(2)} (${b.host.frames} frames, best of 3; the firmware's time includes its process start)`);
  }
}

await parent();

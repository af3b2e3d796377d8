// `offramp measure QDIR --data X.npy [--core m4f|m7|m55]`: the int8 firmware of a quantized folder
// compiled for the core and run under QEMU on the user's rows: flash, RAM, exact instructions per
// stage, decision and exit path, the policy's mean per frame against the whole network's, and the
// answers against the TypeScript reference and onnxruntime.
import type { Command } from 'commander';
import { measureDevice, type DeviceReport } from '../measure/device.js';
import { toolchainStatus } from '../measure/toolchain.js';
import { UNMEASURABLE } from '../measure/cores.js';
import { readManifestFile } from '../split/read.js';
import { OfframpError } from '../errors.js';
import { bytes, microseconds, si, table, toJson } from '../report/units.js';
import { emit, parseNumber } from './common.js';
import { refuseInputsAsOutputs, splitReads } from './guard.js';
import { writeAtomic } from '../util/atomic.js';

const pct = (x: number) => `${(x * 100).toFixed(1)} %`;

export function deviceText(r: DeviceReport, verbose = false): string {
  const f = r.perFrame;
  const equal = r.answers.equalToReference === r.frames;
  const head = [
    `on an emulated ${r.core} (QEMU ${r.machine}), ${r.frames} frames: ${si(f.policy)} instructions per frame with the policy against ${si(f.full)} for the whole network — ${pct(f.savedShare)} saved`,
    `estimated ${microseconds(f.policyMicroseconds)} against ${microseconds(f.fullMicroseconds)} per frame at ${r.basis.clockMhz} MHz (an estimate: ${r.basis.cyclesPerInstruction} cycles per instruction, no wait states; the instruction counts are exact)`,
    `flash ${bytes(r.flash.libraryBytes)} (the library: code, weights, tables), RAM ${bytes(r.ram.libraryBytes)} + stack peak ${bytes(r.ram.stackPeakBytes)}`,
    `answers: ${equal ? 'all equal to' : `${r.frames - r.answers.equalToReference} DIFFER from`} the TypeScript integer reference; label and exit equal to onnxruntime's on ${r.answers.equalToOnnxruntime} of ${r.frames}` + (r.answers.accuracy !== undefined ? `; accuracy ${pct(r.answers.accuracy)}` : ''),
  ];
  const stages = table(['stage', 'MACs', 'instructions', 'per MAC'], r.stages.map((s) => [String(s.index), si(s.macs), si(s.instructions), s.instructionsPerMac.toFixed(2)]));
  const paths = table(['answer from', 'frames', 'instructions per frame'], r.paths.map((p) => [p.exit === r.exits ? 'final output' : `exit ${p.exit}`, String(p.frames), si(p.meanInstructions)]));
  const decisions = table(['decision at', 'made', 'mean instructions', 'max'], r.decisions.map((d) => [`exit ${d.exit}`, String(d.count), String(d.meanInstructions), String(d.maxInstructions)]));
  // where the whole network's instructions go, kernel step by kernel step
  const whole = r.steps.reduce((a, s) => a + s.instructions, 0);
  const steps = table(['stage', 'step', 'kernel', 'node', 'MACs', 'instructions', 'per MAC', 'share'], r.steps.map((s) => [
    String(s.stage), String(s.step), s.kernel, s.node.length > 28 ? `…${s.node.slice(-27)}` : s.node, s.macs ? si(s.macs) : '-', si(s.instructions),
    s.macs ? (s.instructions / s.macs).toFixed(2) : '-', whole ? pct(s.instructions / whole) : '-',
  ]));
  const more = verbose ? ['', decisions, '', `kernel steps on the frames through the whole network (mean instructions):`, steps, '', `policy (${r.policyFrom}): ${JSON.stringify(r.policy)}`] : [];
  const diff = r.answers.differFromOnnxruntime.length ? ['', `where onnxruntime differs: ${r.answers.differFromOnnxruntime.slice(0, 5).map((d) => `frame ${d.frame} (label, exit) ${d.firmware.join(', ')} vs ${d.onnxruntime.join(', ')}`).join('; ')} — a logit a step apart near a threshold (fixed-point requantization against onnxruntime's float one)`] : [];
  return [...head, '', stages, '', paths, ...more, ...diff, ...(equal ? [] : ['', 'the firmware and the TypeScript reference disagree: this is a bug in offramp; please report it with the folder'])].join('\n') + '\n';
}

export function measureCommand(program: Command): void {
  program.command('measure')
    .description('compile the int8 firmware of a quantized folder for a Cortex-M core and run it under QEMU on your rows: flash, RAM, exact instructions per stage, decision and frame')
    .argument('<qdir>', 'quantized folder (quantize output, or DIR/int8 of build --int8), or its manifest.json')
    .requiredOption('--data <file>', '.npy rows [N, ...] in the model input layout, in temporal order')
    .option('--labels <file>', '.npy labels [N], for the firmware accuracy')
    .option('--core <core>', 'm4f (mps2-an386), m7 (mps2-an500) or m55 (mps3-an547)', 'm4f')
    .option('--rows <n>', 'rows measured, the first ones of the file', '200')
    .option('--clock-mhz <mhz>', 'clock for the time estimate (default: 80, 400, 200 MHz for m4f, m7, m55)')
    .option('--json', 'machine-readable result (schema offramp-measure/1)')
    .option('-o, --out <file>', 'also write the JSON result to this file')
    .option('--verbose', 'decisions per exit, instructions per kernel step, and the policy')
    .action(async (qdir: string, o: { data: string; labels?: string; core: string; rows: string; clockMhz?: string; json?: boolean; out?: string; verbose?: boolean }) => {
      if (Object.hasOwn(UNMEASURABLE, o.core)) throw new OfframpError('usage', `--core ${o.core}: ${UNMEASURABLE[o.core]}`);
      const tools = toolchainStatus();
      if (!tools.ready) throw new OfframpError('usage', tools.message);
      const { manifest } = readManifestFile(qdir);
      if (!manifest.quantization) throw new OfframpError('usage', 'not a quantized folder: the firmware measured is int8 (run offramp quantize, or build --int8, and measure DIR/int8)', qdir);
      refuseInputsAsOutputs([...splitReads(qdir, manifest), { file: o.data, role: 'data' }, { file: o.labels, role: 'labels' }], [o.out]);
      const rows = parseNumber(o.rows, '--rows', { int: true, min: 1, max: 100_000 });
      const clockMhz = o.clockMhz === undefined ? undefined : parseNumber(o.clockMhz, '--clock-mhz', { min: 1e-3, max: 1e5 });
      const say = process.stderr.isTTY ? (w: string) => process.stderr.write(`${w}\n`) : undefined;
      const r = await measureDevice({ dir: qdir, data: o.data, labels: o.labels, core: o.core, rows, clockMhz }, say);
      if (o.out) writeAtomic(o.out, toJson(r) + '\n');
      emit(o.json ? toJson(r) + '\n' : deviceText(r, o.verbose));
      if (r.answers.equalToReference !== r.frames) process.exitCode = 1;
    });
}

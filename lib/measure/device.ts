// The int8 firmware of a quantized folder measured on an emulated Cortex-M: emit-c's library and
// the measuring driver compiled for the core, run under QEMU on rows of the user's data, the
// executed instructions of every stage, decision and frame counted exactly; the firmware's answers
// set beside the TypeScript integer reference (they must be equal) and beside onnxruntime on the
// QDQ stage files. Cycles and time are estimates from the instructions (a cycles-per-instruction
// figure per core, stated), never measurements: QEMU counts instructions, not cycles.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import { shippedPath } from '../util/shipped.js';
import { cString } from '../emit/c.js';
import { firmwareFiles } from '../firmware/write.js';
import { Int8Classifier, Int8Machine } from '../firmware/interp.js';
import { handoverBytes, stepMacs } from '../firmware/program.js';
import { loadChain } from '../run/chain.js';
import { readManifestFile } from '../split/read.js';
import { sha256 } from '../split/commit.js';
import { tensorFromData } from '../runtime/ort.js';
import { frames } from '../tune/chain-capture.js';
import { readLabels } from '../data/labels.js';
import { readDataHeader } from '../data/npy.js';
import { chainFor, fullModel, isStream, runFrame, streamStart, streamStep, type FramePolicy, type Policy } from '../policy/index.js';
import { coreOf, type MeasuredCore } from './cores.js';
import { frameProfiles } from './regions.js';
import { measureFirmware } from './measure.js';

export const MEASURE_SCHEMA = 'offramp-measure/1';

/**
 * Cycles per executed instruction, an estimate per core (from memory: single-issue M4 pipelines
 * take 1 cycle for most data-processing and multiply-accumulate instructions, 2 for loads and taken
 * branches; the M7 issues two a cycle at best; the M55 sits between). Zero-wait-state memory assumed.
 */
export const CYCLES_PER_INSTRUCTION: Readonly<Record<MeasuredCore, number>> = { m4f: 1.3, m7: 0.8, m55: 1.0 };

export interface DeviceOptions {
  /** a quantized folder (quantize's output, or DIR/int8 of a build), or its manifest */
  dir: string;
  /** rows of the user's data (.npy), in the model's input layout */
  data: string;
  labels?: string;
  /** m4f, m7 or m55 (default m4f) */
  core?: string;
  /** rows measured (default 200; the first ones of the file, in order, as a stream) */
  rows?: number;
  /** the clock the time estimate uses, MHz (default: the core's typical clock in the built-in target profiles) */
  clockMhz?: number;
  /** overrides the manifest's policy */
  policy?: { value: unknown; from: string; file?: string };
}

export interface DeviceReport {
  schema: typeof MEASURE_SCHEMA;
  dir: string;
  /** SHA-256 of the folder's manifest as measured (hex): `cost DIR --measured` checks the folder against it */
  manifestSha256: string;
  core: MeasuredCore;
  machine: string;
  /** what the figures are: instructions counted exactly; cycles and time estimated from them */
  basis: { instructions: 'counted exactly on the emulator'; cyclesPerInstruction: number; cycles: 'estimate: instructions × cyclesPerInstruction, no wait states'; clockMhz: number };
  /** bytes: the library's own share of the ELF (code, weights, tables) and the whole program with its harness */
  flash: { libraryBytes: number; totalBytes: number };
  /** bytes: the library's data and bss (arena, handover, logits, columns), the stack's high-water mark over the run */
  ram: { libraryBytes: number; stackPeakBytes: number; arenaBytes: number; handoverBytes: number };
  /** early exits; exit index `exits` is the final output */
  exits: number;
  stages: { index: number; file: string; macs: number; instructions: number; instructionsPerMac: number }[];
  /** each kernel step of each stage on the frames through the whole network: its kernel, ONNX node, MACs and mean instructions */
  steps: { stage: number; step: number; kernel: string; node: string; macs: number; instructions: number }[];
  /** instructions of one decision at each exit (mean over the frames that made it) */
  decisions: { exit: number; count: number; meanInstructions: number; maxInstructions: number }[];
  /** frames by the exit their answer came from: how many, mean instructions */
  paths: { exit: number; frames: number; meanInstructions: number }[];
  frames: number;
  /** mean instructions per frame with the policy, and for the whole network on the same kind of frame */
  perFrame: { policy: number; full: number; savedShare: number; policyMicroseconds: number; fullMicroseconds: number };
  /** the firmware's answers against the TypeScript integer reference (must all be equal) and against onnxruntime */
  answers: { equalToReference: number; equalToOnnxruntime: number; differFromOnnxruntime: { frame: number; firmware: [number, number]; onnxruntime: [number, number] }[]; accuracy?: number };
  policy: Policy;
  policyFrom: string;
}

const driverSource = () => shippedPath('measure/driver/offramp_measure_main.c', 'the measuring driver');

const bad = (option: string, what: string) => new OfframpError('usage', `${option}: ${what}`);
const CLOCK: Record<MeasuredCore, number> = { m4f: 80, m7: 400, m55: 200 };

/** Measure the folder's int8 firmware on rows of `data`. `onProgress` hears what is being done. */
export async function measureDevice(o: DeviceOptions, onProgress?: (what: string) => void): Promise<DeviceReport> {
  if (!o || typeof o.dir !== 'string' || !o.dir) throw bad('dir', 'a quantized folder');
  if (typeof o.data !== 'string' || !o.data) throw bad('data', 'a .npy file of rows');
  const core = coreOf(o.core ?? 'm4f', 'core').name;
  const rows = o.rows ?? 200;
  if (!Number.isInteger(rows) || rows < 1 || rows > 100_000) throw bad('rows', `${o.rows} is not a whole number of rows in 1 … 100000`);
  const clockMhz = o.clockMhz ?? CLOCK[core];
  if (!(clockMhz > 0) || !Number.isFinite(clockMhz)) throw bad('clockMhz', `${o.clockMhz} is not a positive clock`);
  const manifestSha256 = sha256(readManifestFile(o.dir).bytes);
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-device-'));
  try {
    const src = path.join(tmp, 'src');
    fs.mkdirSync(src);
    const fw = firmwareFiles(o.dir, src, o.policy ? { policy: o.policy } : {});
    for (const f of fw.files) fs.writeFileSync(path.join(src, f.name), f.text);
    const program = fw.program, E = program.logits.length - 1;
    // the rows as the firmware reads them: float32, the model's input layout
    const total = readDataHeader(o.data).rows;
    const n = Math.min(rows, total);
    const x = new Float32Array(n * program.input.tensor.size);
    let i = 0;
    for (const t of frames(readManifestFile(o.dir).manifest, o.data, n)) x.set(t.data as Float32Array, i++ * program.input.tensor.size);
    const labels = o.labels ? readLabels(o.labels, { rows: total, of: o.data, classes: program.classes }).subarray(0, n) : undefined;
    const rowsFile = path.join(tmp, 'rows.bin');
    fs.writeFileSync(rowsFile, x);
    const full = Math.min(n, 8);
    onProgress?.(`compiling the int8 library for ${core} and running ${n} frames (+ ${full} through the whole network) under QEMU`);
    const m = await measureFirmware({
      core, sources: fw.files.filter((f) => f.name.endsWith('.c')).map((f) => path.join(src, f.name)),
      driverSources: [driverSource()], includeDirs: [src], defines: [`FULL_FRAMES=${full}`], cflags: ['-ffp-contract=off'],
      rowsC: `const char offramp_measure_rows[] = ${cString(rowsFile)};\n`, timeoutMs: 20 * 60_000,
    });
    if (m.exitCode !== 0) throw new OfframpError('runtime', `the firmware exited with status ${m.exitCode}: ${m.stderr.trim().split('\n')[0] ?? ''}`);
    const lines = m.stdout.trim().split('\n').map((l) => l.trim().split(' ').map(Number));
    if (lines.length !== n + full) throw new OfframpError('runtime', `the firmware answered ${lines.length} frames of ${n + full}`);
    const answers = lines.slice(0, n);

    onProgress?.('the TypeScript integer reference and onnxruntime on the same frames');
    const reach = fw.table.reach.map(Number);
    const ref = new Int8Classifier(new Int8Machine(program), fw.policy, reach);
    let equalRef = 0;
    const per = program.input.tensor.size;
    for (let k = 0; k < n; k++) {
      const r = ref.classify(x.subarray(k * per, (k + 1) * per));
      if (r.label === answers[k][0] && r.exit === answers[k][1] && +r.reused === answers[k][2]) equalRef++;
    }
    const ortAnswers = await onnxruntimeAnswers(o.dir, fw.policy, reach, [...fw.table.exitNames, fw.table.finalOutput], program.classes, x, per);
    const ort = ortAnswers.flatMap((a, k) => (a.label !== answers[k][0] || a.exit !== answers[k][1] ? [{ frame: k, firmware: [answers[k][0], answers[k][1]] as [number, number], onnxruntime: [a.label, a.exit] as [number, number] }] : []));

    const profiles = frameProfiles(m.occurrences);
    const policyFrames = profiles.slice(0, n), fullFrames = profiles.slice(n);
    const mean = (v: number[]) => (v.length ? v.reduce((a, b) => a + b, 0) / v.length : 0);
    const stageMean = (k: number) => mean(profiles.flatMap((p) => p.stages.filter((s) => s.index === k).map((s) => s.instructions)));
    const cpi = CYCLES_PER_INSTRUCTION[core];
    const us = (instr: number) => (instr * cpi) / clockMhz;
    const perPolicy = mean(policyFrames.map((p) => p.instructions)), perFull = mean(fullFrames.map((p) => p.instructions));
    const decisions = Array.from({ length: E + 1 }, (_, k) => {
      const d = policyFrames.flatMap((p) => p.decisions.filter((s) => s.index === k).map((s) => s.instructions));
      return { exit: k, count: d.length, meanInstructions: Math.round(mean(d)), maxInstructions: d.length ? Math.max(...d) : 0 };
    }).filter((d) => d.count > 0);
    const paths = Array.from({ length: E + 1 }, (_, k) => {
      const f = policyFrames.filter((_, j) => answers[j][1] === k);
      return { exit: k, frames: f.length, meanInstructions: Math.round(mean(f.map((p) => p.instructions))) };
    }).filter((p) => p.frames > 0);
    const accuracy = labels ? answers.filter((a, k) => a[0] === labels[k]).length / n : undefined;
    return {
      schema: MEASURE_SCHEMA, dir: o.dir, manifestSha256, core, machine: m.machine,
      basis: { instructions: 'counted exactly on the emulator', cyclesPerInstruction: cpi, cycles: 'estimate: instructions × cyclesPerInstruction, no wait states', clockMhz },
      flash: { libraryBytes: m.flash.library, totalBytes: m.flash.total },
      ram: { libraryBytes: m.ram.library, stackPeakBytes: m.ram.stackPeak, arenaBytes: program.arenaBytes, handoverBytes: handoverBytes(program) },
      exits: E,
      stages: program.stages.map((s) => {
        const ins = Math.round(stageMean(s.index));
        return { index: s.index, file: s.file, macs: s.macs, instructions: ins, instructionsPerMac: s.macs ? Math.round((ins / s.macs) * 1000) / 1000 : 0 };
      }),
      steps: program.stages.flatMap((s) => s.steps.map((st, i) => ({
        stage: s.index, step: i, kernel: st.kind, node: st.node, macs: stepMacs(st),
        instructions: Math.round(mean(fullFrames.flatMap((p) => p.steps.filter((x) => x.stage === s.index && x.index === i).map((x) => x.instructions)))),
      }))),
      decisions, paths, frames: n,
      perFrame: {
        policy: Math.round(perPolicy), full: Math.round(perFull), savedShare: perFull ? Math.round((1 - perPolicy / perFull) * 10000) / 10000 : 0,
        policyMicroseconds: Math.round(us(perPolicy) * 10) / 10, fullMicroseconds: Math.round(us(perFull) * 10) / 10,
      },
      answers: { equalToReference: equalRef, equalToOnnxruntime: n - ort.length, differFromOnnxruntime: ort.slice(0, 10), ...(accuracy !== undefined && { accuracy: Math.round(accuracy * 10000) / 10000 }) },
      policy: fw.policy, policyFrom: fw.policyFrom,
    };
  } finally {
    fs.rmSync(tmp, { recursive: true, force: true });
  }
}


/**
 * The policy on onnxruntime's outputs of the QDQ stage files (the outside view of the firmware), frame by
 * frame in order: each frame's label and exit. `outs` names the exits' outputs, the final output last;
 * `onFrame` sees each frame's outputs (float32, as DequantizeLinear gives them).
 */
export async function onnxruntimeAnswers(dir: string, policy: Policy, reach: ArrayLike<number>, outs: string[], classes: number, x: Float32Array, per: number,
  onFrame?: (k: number, z: Float32Array[]) => void): Promise<{ label: number; exit: number }[]> {
  const E = outs.length - 1;
  const chain = await loadChain(dir);
  const frame: FramePolicy = isStream(policy) ? policy.then ?? fullModel(E) : policy;
  const ch = chainFor(frame, reach, E, classes);
  const st = streamStart(classes);
  const shape = chain.manifest.inputs[0].shape.map(Number);
  const answers: { label: number; exit: number }[] = [];
  try {
    for (let k = 0; k * per < x.length; k++) {
      const r = await chain.run({ [chain.manifest.inputs[0].name]: tensorFromData(1, shape, x.subarray(k * per, (k + 1) * per)) });
      const z = outs.map((o) => r.outputs[o].data as Float32Array);
      onFrame?.(k, z);
      const v = { data: (j: number) => z[j], offset: () => 0 };
      const a = isStream(policy) ? streamStep(policy, st, v, ch) : runFrame(policy, ch, v, 0);
      answers.push({ label: a.label, exit: a.exit });
    }
  } finally { await chain.release(); }
  return answers;
}

// The int8 firmware on the host: emit-c's library compiled with gcc and the driver in
// test/helpers/c/firmware_main.c, the TypeScript reference (lib/firmware/interp.ts) writing the
// same byte streams, and onnxruntime running the QDQ stage files for the outside view.
import { spawnSync } from 'node:child_process';
import { expect } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { lowerChain } from '../../lib/firmware/lower.js';
import { Int8Classifier, Int8Machine } from '../../lib/firmware/interp.js';
import type { Program } from '../../lib/firmware/program.js';
import { readManifestFile } from '../../lib/split/read.js';
import { chainTable } from '../../lib/emit/table.js';
import { quantizeValue } from '../../lib/kernels/requant.js';
import type { Policy } from '../../lib/policy/index.js';
import { onnxruntimeAnswers } from '../../lib/measure/device.js';
import type { Manifest } from '../../lib/split/manifest.js';

export const GCC = spawnSync('gcc', ['--version']).status === 0;
export const CFLAGS = ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-pedantic', '-ffp-contract=off'];
const DRIVER = path.resolve(import.meta.dirname, 'c/firmware_main.c');

/** Compile every .c of an emit-c folder with the driver; returns the executable. */
export function compileFirmware(src: string, exe: string): void {
  const files = fs.readdirSync(src).filter((f) => f.endsWith('.c')).map((f) => path.join(src, f));
  const r = spawnSync('gcc', [...CFLAGS, '-I', src, ...files, DRIVER, '-o', exe], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`gcc: ${r.stderr}`);
}

const bytes = (x: Float32Array) => Buffer.from(x.buffer, x.byteOffset, x.byteLength);
function run(exe: string, mode: string, frames: Float32Array): Buffer {
  const r = spawnSync(exe, [mode], { input: bytes(frames), maxBuffer: 1 << 30 });
  if (r.status !== 0) throw new Error(`${exe} ${mode}: exit ${r.status} ${r.stderr}`);
  return r.stdout;
}

export interface Answers { label: Int32Array; exit: Int32Array; reused: Int32Array }
export function firmwareAnswers(exe: string, frames: Float32Array): Answers {
  const b = run(exe, 'answers', frames);
  const a = new Int32Array(b.buffer, b.byteOffset, b.length / 4);
  const n = a.length / 3;
  return { label: Int32Array.from({ length: n }, (_, i) => a[3 * i]), exit: Int32Array.from({ length: n }, (_, i) => a[3 * i + 1]), reused: Int32Array.from({ length: n }, (_, i) => a[3 * i + 2]) };
}
/** Every int8 tensor of every frame, in the driver's order (input, then each step's output). */
export const firmwareTensors = (exe: string, frames: Float32Array) => run(exe, 'tensors', frames);

export function loadProgram(dir: string): { program: Program; manifest: Manifest; reach: number[]; outputs: string[] } {
  const { manifest, file } = readManifestFile(dir);
  const t = chainTable(manifest, file);
  return { program: lowerChain(manifest, path.dirname(file), file), manifest, reach: t.reach.map(Number), outputs: [...t.exitNames, t.finalOutput] };
}

export function referenceTensors(program: Program, frames: Float32Array): Buffer {
  const m = new Int8Machine(program), per = program.input.tensor.size, out: Buffer[] = [];
  for (let i = 0; i * per < frames.length; i++) {
    m.load(frames.subarray(i * per, (i + 1) * per));
    out.push(Buffer.from(m.view(program.input.tensor)));
    for (let k = 0; k < program.stages.length; k++) {
      const seen = new Map<string, Int8Array>();
      m.runStage(k, seen);
      for (const s of program.stages[k].steps) out.push(Buffer.from(seen.get(s.y.name)!));
    }
  }
  return Buffer.concat(out);
}

export function referenceAnswers(program: Program, policy: Policy, reach: number[], frames: Float32Array): Answers {
  const c = new Int8Classifier(new Int8Machine(program), policy, reach), per = program.input.tensor.size, n = frames.length / per;
  const a: Answers = { label: new Int32Array(n), exit: new Int32Array(n), reused: new Int32Array(n) };
  for (let i = 0; i < n; i++) {
    const r = c.classify(frames.subarray(i * per, (i + 1) * per));
    a.label[i] = r.label; a.exit[i] = r.exit; a.reused[i] = +r.reused;
  }
  return a;
}

/**
 * The compiled firmware `exe` of quantized folder `dir` against the TypeScript reference: every int8 tensor
 * of the frames `few` byte for byte, and the label and exit of every frame of `all` under the manifest's policy.
 */
export function expectReferenceEqual(exe: string, dir: string, few: Float32Array, all: Float32Array): { values: number; answers: Answers; program: Program } {
  const { program, manifest, reach } = loadProgram(dir);
  const c = firmwareTensors(exe, few), t = referenceTensors(program, few);
  expect(c.length).toBe(t.length);
  expect(c.equals(t)).toBe(true);
  const fa = firmwareAnswers(exe, all), ta = referenceAnswers(program, manifest.policy!.rule, reach, all);
  expect(Array.from(fa.label)).toEqual(Array.from(ta.label));
  expect(Array.from(fa.exit)).toEqual(Array.from(ta.exit));
  return { values: t.length, answers: fa, program };
}

export interface OrtView {
  /** |q_firmware − q_onnxruntime| over every exit's and the final output's int8 logits (what the chain gives out): count by steps */
  steps: Map<number, number>;
  /** where the firmware's label or exit under the policy differs from the policy on onnxruntime's outputs */
  differ: { frame: number; firmware: [number, number]; ort: [number, number] }[];
  frames: number;
}

/** onnxruntime on the QDQ stage files: its int8 logits against the reference's, and the policy's answers on them against the firmware's. */
export async function againstOrt(dir: string, program: Program, outs: string[], policy: Policy, reach: number[], frames: Float32Array, fw: Answers): Promise<OrtView> {
  const per = program.input.tensor.size, n = frames.length / per;
  const m = new Int8Machine(program);
  const steps = new Map<number, number>();
  const ort = await onnxruntimeAnswers(dir, policy, reach, outs, program.classes, frames, per, (i, z) => {
    m.load(frames.subarray(i * per, (i + 1) * per)); m.runTo(program.stages.length - 1);
    program.logits.forEach((t, k) => {
      for (let j = 0; j < t.size; j++) {
        const d = Math.abs(quantizeValue(z[k][j], t.scale, t.zeroPoint) - m.logits[k][j]);
        steps.set(d, (steps.get(d) ?? 0) + 1);
      }
    });
  });
  const differ = ort.flatMap((a, i) => (a.label !== fw.label[i] || a.exit !== fw.exit[i] ? [{ frame: i, firmware: [fw.label[i], fw.exit[i]] as [number, number], ort: [a.label, a.exit] as [number, number] }] : []));
  return { steps, differ, frames: n };
}

export const histogram = (m: Map<number, number>) => [...m].sort((a, b) => a[0] - b[0]).map(([k, v]) => `${k} step${k === 1 ? '' : 's'}: ${v}`).join(', ');

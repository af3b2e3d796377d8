// Each C kernel against its TypeScript reference (lib/kernels/*.ts) on random shapes: odd sizes, padding
// on every side (unequal), strides up to 3, dilation, groups and depthwise, 1-D and 2-D, pooling windows
// that run past the input (ceil_mode-like), count_include_pad, fused clamps, random multipliers and
// zero points. The tables are written by lib/firmware/tables.ts, as for a model, and compiled with gcc.
import { describe, it, expect, afterAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { mulberry32 } from '../lib/graph/build.js';
import { quantizeMultiplier, type Multiplier } from '../lib/kernels/requant.js';
import { conv } from '../lib/kernels/conv.js';
import { dense } from '../lib/kernels/dense.js';
import { avgpool, maxpool } from '../lib/kernels/pool.js';
import { rescale } from '../lib/kernels/misc.js';
import { netTables } from '../lib/firmware/tables.js';
import { firmwareSourceDirs } from '../lib/firmware/write.js';
import type { Program, Step, Tensor8 } from '../lib/firmware/program.js';
import { GCC, CFLAGS } from './helpers/firmware.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import { measureFirmware } from '../lib/measure/measure.js';
import { cString } from '../lib/emit/c.js';

const EMU = toolchainStatus().ready;
if (!EMU && process.env.CI) throw new Error(`the emulated kernel tests need the toolchain under CI: ${toolchainStatus().message}`);

if (!GCC && process.env.CI) throw new Error('gcc is missing: the kernel tests need it under CI');
const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-kernels-'));
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));

const rnd = mulberry32(20261204);
const int = (lo: number, hi: number) => lo + Math.floor(rnd() * (hi - lo + 1));
const i8 = (n: number, lo = -128, hi = 127) => Int8Array.from({ length: n }, () => int(lo, hi));
const mul = (): Multiplier => quantizeMultiplier(10 ** (rnd() * 4 - 4.5));
const clamp = (z: number): [number, number] => (rnd() < 0.4 ? [Math.max(-128, z), 127] : rnd() < 0.2 ? [int(-128, -20), int(20, 127)] : [-128, 127]);
const outSize = (n: number, k: number, s: number, d: number, pb: number, pe: number) => Math.floor((n + pb + pe - (d * (k - 1) + 1)) / s) + 1;

let offset = 0;
const tensor = (name: string, size: number): Tensor8 => {
  const t: Tensor8 = { name, size, shape: [size], scale: 1, zeroPoint: 0, slot: { kind: 'arena', offset } };
  offset += Math.ceil(size / 16) * 16;
  return t;
};

function convStep(j: number, oneD: boolean, depthwise: boolean): Step {
  const groups = depthwise ? int(1, 4) : rnd() < 0.3 ? int(2, 3) : 1;
  const inC = depthwise ? groups : groups * int(1, 3), outC = depthwise ? groups : groups * int(1, 3);
  const inH = oneD ? 1 : int(1, 9), inW = int(1, 11);
  const kH = oneD ? 1 : int(1, Math.min(4, inH + 2)), kW = int(1, Math.min(4, inW + 2));
  const sH = oneD ? 1 : int(1, 3), sW = int(1, 3), dH = oneD ? 1 : int(1, 2), dW = int(1, 2);
  let pT = oneD ? 0 : int(0, 2), pB = oneD ? 0 : int(0, 2), pL = int(0, 2), pR = int(0, 2);
  while (outSize(inH, kH, sH, dH, pT, pB) < 1) pB++;
  while (outSize(inW, kW, sW, dW, pL, pR) < 1) pR++;
  const outH = outSize(inH, kH, sH, dH, pT, pB), outW = outSize(inW, kW, sW, dW, pL, pR);
  const inZero = int(-128, 127), outZero = int(-128, 127), [lo, hi] = clamp(outZero);
  const p = {
    inC, inH, inW, outC, outH, outW, kH, kW, strideH: sH, strideW: sW, dilH: dH, dilW: dW, padTop: pT, padLeft: pL, groups,
    inZero, outZero, lo, hi, weight: i8(outC * (inC / groups) * kH * kW, -127, 127),
    bias: Int32Array.from({ length: outC }, () => int(-20000, 20000)), mul: Array.from({ length: outC }, mul),
  };
  return { kind: 'conv', node: `conv${j}`, x: tensor(`x${j}`, inC * inH * inW), y: tensor(`y${j}`, outC * outH * outW), p };
}

function poolStep(j: number, avg: boolean): Step {
  const c = int(1, 4), oneD = rnd() < 0.3;
  const inH = oneD ? 1 : int(1, 9), inW = int(1, 11);
  const kH = oneD ? 1 : int(1, Math.min(4, inH + 1)), kW = int(1, Math.min(4, inW + 1));
  const sH = oneD ? 1 : int(1, 3), sW = int(1, 3), dH = avg || oneD ? 1 : int(1, 2), dW = avg ? 1 : int(1, 2);
  const pT = oneD ? 0 : int(0, Math.floor(kH / 2)), pL = int(0, Math.floor(kW / 2));
  const pB = oneD ? 0 : int(0, Math.floor(kH / 2)), pR = int(0, Math.floor(kW / 2));
  // a window may start inside the end padding's reach and run past the input: ceil_mode's extra window
  const outH = Math.max(1, outSize(inH, kH, sH, dH, pT, pB) + (rnd() < 0.3 && !oneD ? 1 : 0));
  const outW = Math.max(1, outSize(inW, kW, sW, dW, pL, pR) + (rnd() < 0.3 ? 1 : 0));
  const inZero = int(-128, 127), outZero = avg ? int(-128, 127) : inZero, [lo, hi] = avg ? clamp(outZero) : [-128, 127];
  const p = {
    c, inH, inW, outH, outW, kH, kW, strideH: sH, strideW: sW, dilH: dH, dilW: dW, padTop: pT, padLeft: pL, padBottom: pB, padRight: pR,
    includePad: avg && rnd() < 0.5, inZero, outZero, lo, hi,
    mul: avg ? Array.from({ length: kH * kW + 1 }, (_, n) => (n ? quantizeMultiplier((0.2 + rnd() * 2) / n) : { mult: 0, shift: 0 })) : [],
  };
  return { kind: avg ? 'avgpool' : 'maxpool', node: `pool${j}`, x: tensor(`x${j}`, c * inH * inW), y: tensor(`y${j}`, c * outH * outW), p };
}

function denseStep(j: number): Step {
  const K = int(1, 40), N = int(1, 12), inZero = int(-128, 127), outZero = int(-128, 127), [lo, hi] = clamp(outZero);
  const p = { in: K, out: N, inZero, outZero, lo, hi, weight: i8(K * N, -127, 127), bias: Int32Array.from({ length: N }, () => int(-50000, 50000)), mul: Array.from({ length: N }, mul) };
  return { kind: 'dense', node: `dense${j}`, x: tensor(`x${j}`, K), y: tensor(`y${j}`, N), p };
}

function rescaleStep(j: number): Step {
  const n = int(1, 50), outZero = int(-128, 127), [lo, hi] = clamp(outZero);
  return { kind: 'rescale', node: `rescale${j}`, x: tensor(`x${j}`, n), y: tensor(`y${j}`, n), p: { n, inZero: int(-128, 127), outZero, lo, hi, mul: quantizeMultiplier(0.3 + rnd() * 3) } };
}

function reference(s: Step, x: Int8Array): Int8Array {
  const y = new Int8Array(s.y.size);
  switch (s.kind) {
    case 'conv': conv(s.p, x, y); break;
    case 'dense': dense(s.p, x, y); break;
    case 'maxpool': maxpool(s.p, x, y); break;
    case 'avgpool': avgpool(s.p, x, y); break;
    case 'rescale': rescale(s.p, x, y); break;
    case 'copy': y.set(x); break;
  }
  return y;
}

describe.skipIf(!GCC)('C kernels against the TypeScript reference', { timeout: 600_000 }, () => {
  it('conv (2-D, 1-D, grouped, depthwise), dense, max and average pooling, rescale: every output byte equal', () => {
    const steps: Step[] = [];
    for (let j = 0; j < 60; j++) steps.push(convStep(j, false, false));
    for (let j = 60; j < 80; j++) steps.push(convStep(j, true, false));
    for (let j = 80; j < 100; j++) steps.push(convStep(j, rnd() < 0.3, true));
    for (let j = 100; j < 130; j++) steps.push(poolStep(j, false));
    for (let j = 130; j < 170; j++) steps.push(poolStep(j, true));
    for (let j = 170; j < 200; j++) steps.push(denseStep(j));
    for (let j = 200; j < 220; j++) steps.push(rescaleStep(j));
    const classes = 4;
    const program: Program = {
      stages: [{ index: 0, file: 'kernels', steps, arenaBytes: offset, macs: 0 }],
      input: { name: 'x', tensor: steps[0].x }, handovers: [], logits: [{ ...tensor('unused', classes), slot: { kind: 'logits', exit: 0 } }],
      exitStage: [0], classes, arenaBytes: offset, arenaAlign: 16,
    };
    const dir = path.join(tmp, 'k');
    fs.mkdirSync(dir);
    for (const f of netTables({ program, manifestName: 'none', manifestSha256: '0'.repeat(64) })) fs.writeFileSync(path.join(dir, f.name), f.text);
    // the net tables include offramp_policy.h for the chain's sizes and offramp_q8_t: a stand-in for one stage, no exits
    fs.writeFileSync(path.join(dir, 'offramp_policy.h'), `#ifndef OFFRAMP_POLICY_H\n#define OFFRAMP_POLICY_H\n#include <stdint.h>\n#define OFFRAMP_STAGES 1\n#define OFFRAMP_EXITS 0\n#define OFFRAMP_CLASSES ${classes}\ntypedef struct { float scale; int32_t zero_point; } offramp_q8_t;\n#endif\n`);
    const [kern, fw] = firmwareSourceDirs();
    const srcs = [path.join(dir, 'offramp_net.c'), path.join(fw, 'offramp_run.c'), ...fs.readdirSync(kern).filter((f) => f.endsWith('.c')).map((f) => path.join(kern, f)), path.resolve(import.meta.dirname, 'helpers/c/kernel_main.c')];
    const exe = path.join(dir, 'kernels');
    const cc = spawnSync('gcc', [...CFLAGS, '-I', dir, '-I', kern, '-I', fw, ...srcs, '-o', exe], { encoding: 'utf8' });
    expect(cc.status, cc.stderr).toBe(0);
    const xs = steps.map((s) => i8(s.x.size));
    const input = Buffer.concat(xs.flatMap((x) => [Buffer.from(Int32Array.of(x.length).buffer), Buffer.from(x.buffer)]));
    const run = spawnSync(exe, { input, maxBuffer: 1 << 26 });
    expect(run.status).toBe(0);
    const out = new Int8Array(run.stdout.buffer, run.stdout.byteOffset, run.stdout.length);
    expect(compare(steps, xs, out)).toBe(0);
    console.log(`C kernels: ${steps.length} random cases (${steps.filter((s) => s.kind === 'conv').length} conv, ${steps.filter((s) => s.kind === 'dense').length} dense, ${steps.filter((s) => s.kind.endsWith('pool')).length} pool, ${steps.filter((s) => s.kind === 'rescale').length} rescale), ${out.length} output bytes, all equal to the TypeScript reference`);
    built = { dir, steps, xs, input };
  });

  it.skipIf(!EMU)('the same cases through the DSP path (SXTB16/SMLAD) on the emulated m4f and m55: every output byte equal', async () => {
    expect(built).toBeDefined();
    const { dir, steps, xs, input } = built!;
    const [kern, fw] = firmwareSourceDirs();
    const file = path.join(dir, 'input.bin');
    fs.writeFileSync(file, input);
    // the host driver reads stdin; under semihosting the cases come from a host file and go out as hex
    const driver = `#include <stdio.h>\n#include "offramp_net.h"\nextern const char cases[];\nint main(void) {\n  int32_t j, n, i;\n  const offramp_stage_program_t *st = &offramp_net_stages[0];\n  FILE *f = fopen(cases, "rb");\n  if (!f) return 2;\n  for (j = 0; j < st->count; j++) {\n    if (fread(&n, sizeof n, 1, f) != 1) return 3;\n    if (n > 0 && fread((int8_t *)st->steps[j].x, 1, (size_t)n, f) != (size_t)n) return 4;\n  }\n  for (j = 0; j < st->count; j++) {\n    offramp_stage_program_t one;\n    one.steps = &st->steps[j];\n    one.count = 1;\n    offramp_run_steps(&one);\n    for (i = 0; i < one.steps->bytes; i++) printf("%02x", (unsigned)(uint8_t)one.steps->y[i]);\n  }\n  return 0;\n}\nconst char cases[] = ${cString(file)};\n`;
    for (const core of ['m4f', 'm55']) {
      const m = await measureFirmware({ core, sources: [path.join(dir, 'offramp_net.c'), path.join(fw, 'offramp_run.c'), ...fs.readdirSync(kern).filter((f) => f.endsWith('.c')).map((f) => path.join(kern, f))], rowsC: driver, includeDirs: [dir, kern, fw], trace: false });
      expect(m.exitCode, m.stderr).toBe(0);
      const out = Int8Array.from(Buffer.from(m.stdout.trim(), 'hex'));
      expect(compare(steps, xs, out), core).toBe(0);
      console.log(`C kernels on ${core} (DSP extension): ${steps.length} random cases, ${out.length} output bytes, all equal to the TypeScript reference`);
    }
  });
});

let built: { dir: string; steps: Step[]; xs: Int8Array[]; input: Buffer } | undefined;

/** Cases whose output differs from the reference (printed). */
function compare(steps: Step[], xs: Int8Array[], out: Int8Array): number {
    let at = 0, bad = 0;
    steps.forEach((s, j) => {
      const want = reference(s, xs[j]), got = out.subarray(at, at + want.length);
      at += want.length;
      if (!want.every((v, i) => v === got[i])) { bad++; console.log(`step ${j} (${s.kind}) differs: ${JSON.stringify({ ...s.p, weight: undefined, bias: undefined, mul: undefined })}`); }
    });
    return at === out.length ? bad : bad + 1;
}

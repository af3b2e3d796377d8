// Each C kernel against its TypeScript reference (lib/kernels/*.ts) on random shapes: odd sizes, padding
// on every side (unequal), strides up to 3, dilation, groups and depthwise, 1-D and 2-D, pooling windows
// that run past the input (ceil_mode-like), count_include_pad, fused clamps, random multipliers and
// zero points; Add and Mul with each broadcast pattern (and Add's ties to even), activation tables,
// Concat parts copied or requantized, permutations of rank 1 to 5, Split parts. The tables are written by lib/firmware/tables.ts, as for a model, and compiled with gcc.
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
import { add, addMultipliers, lut, mul as mulKernel } from '../lib/kernels/eltwise.js';
import { concat, slice, transpose } from '../lib/kernels/layout.js';
import { activationTable, unaryOf } from '../lib/kernels/lut.js';
import { netTables } from '../lib/firmware/tables.js';
import { firmwareSourceDirs } from '../lib/firmware/write.js';
import { stepInputs, type Program, type Step, type Tensor8 } from '../lib/firmware/program.js';
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
// one multiplier in eight at 0.5 or more (shift ≤ 0): the conv's requantization with its test, beside the
// common path without it (every channel of the group at shift ≥ 1)
const mul = (): Multiplier => quantizeMultiplier(10 ** (rnd() * 4.8 - 4.5));
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

/** b broadcast four ways over [C, H·W]: the same shape, a scalar, one value per channel, one per position (the last axes). */
function broadcast(): { n: number; inner: number; bN: number } {
  const c = int(1, 6), hw = int(1, 4) * int(1, 5), r = rnd();
  return r < 0.3 ? { n: c * hw, inner: 1, bN: c * hw } : r < 0.45 ? { n: c * hw, inner: c * hw, bN: 1 } : r < 0.8 ? { n: c * hw, inner: hw, bN: c } : { n: c * hw, inner: 1, bN: hw };
}
const scale = () => 10 ** (rnd() * 3 - 3);

function addStep(j: number): Step {
  const b = broadcast(), [sa, sb, sy] = [scale(), scale(), scale()], r = rnd();
  // now and then powers of two (sums exactly half a step: ties to even), or operands of very different
  // scales (the smaller multiplier keeps fewer bits)
  const m = r < 0.25 ? addMultipliers(2 ** -int(0, 3), 2 ** -int(1, 4)) : addMultipliers(sa / sy, (r < 0.4 ? 1e-6 : 1) * sb / sy);
  const outZero = int(-128, 127), [lo, hi] = clamp(outZero);
  return { kind: 'add', node: `add${j}`, x: tensor(`a${j}`, b.n), x2: tensor(`b${j}`, b.bN), y: tensor(`y${j}`, b.n),
    p: { ...b, aZero: int(-128, 127), bZero: int(-128, 127), outZero, lo, hi, ...m } };
}

function mulStep(j: number): Step {
  const b = broadcast(), outZero = int(-128, 127), [lo, hi] = clamp(outZero);
  return { kind: 'mul', node: `mul${j}`, x: tensor(`a${j}`, b.n), x2: tensor(`b${j}`, b.bN), y: tensor(`y${j}`, b.n),
    p: { ...b, aZero: int(-128, 127), bZero: int(-128, 127), outZero, lo, hi, mul: quantizeMultiplier(scale() * scale() / scale()) } };
}

function lutStep(j: number): Step {
  const op = ['Sigmoid', 'Tanh', 'HardSigmoid', 'HardSwish', 'LeakyRelu'][int(0, 4)];
  const fn = unaryOf(op, { float: (_: string, d: number) => d })!;
  const n = int(1, 60), outZero = int(-128, 127), [lo, hi] = clamp(outZero);
  const table = activationTable(fn, { scale: scale() * 40, zeroPoint: int(-128, 127) }, { scale: scale(), zeroPoint: outZero }, lo, hi);
  return { kind: 'lut', node: `lut${j}`, x: tensor(`x${j}`, n), y: tensor(`y${j}`, n), p: { n, table } };
}

function concatStep(j: number): Step {
  const count = int(1, 4), outer = int(1, 3), outZero = int(-128, 127);
  const [lo, hi] = rnd() < 0.3 ? clamp(outZero) : [-128, 127];
  const parts = Array.from({ length: count }, () => {
    const same = rnd() < 0.3 && lo === -128 && hi === 127;
    return { block: int(1, 20), inZero: same ? outZero : int(-128, 127), mul: quantizeMultiplier(same ? 1 : 0.2 + rnd() * 3), copy: same };
  });
  const xs = parts.map((q, k) => tensor(`x${j}_${k}`, outer * q.block));
  return { kind: 'concat', node: `concat${j}`, x: xs[0], xs, y: tensor(`y${j}`, outer * parts.reduce((a, q) => a + q.block, 0)), p: { outer, outZero, lo, hi, parts } };
}

function transposeStep(j: number): Step {
  const rank = int(1, 5), inDims = Array.from({ length: rank }, () => int(1, 5));
  const perm = Array.from({ length: rank }, (_, i) => i);
  for (let i = rank - 1; i > 0; i--) { const k = int(0, i); [perm[i], perm[k]] = [perm[k], perm[i]]; }
  const inStrides = inDims.map((_, d) => inDims.slice(d + 1).reduce((a, b) => a * b, 1));
  const n = inDims.reduce((a, b) => a * b, 1);
  return { kind: 'transpose', node: `transpose${j}`, x: tensor(`x${j}`, n), y: tensor(`y${j}`, n), p: { n, dims: perm.map((d) => inDims[d]), strides: perm.map((d) => inStrides[d]) } };
}

function sliceStep(j: number): Step {
  const outer = int(1, 3), inner = int(1, 6), rows = int(1, 6), from = int(0, rows - 1), take = int(1, rows - from);
  const outZero = int(-128, 127), same = rnd() < 0.3, [lo, hi] = same ? [-128, 127] : clamp(outZero);
  return { kind: 'slice', node: `slice${j}`, x: tensor(`x${j}`, outer * rows * inner), y: tensor(`y${j}`, outer * take * inner), p: {
    outer, inRow: rows * inner, start: from * inner, block: take * inner, inZero: same ? outZero : int(-128, 127), outZero, lo, hi,
    mul: quantizeMultiplier(same ? 1 : 0.2 + rnd() * 3), copy: same,
  } };
}

function reference(s: Step, xs: Int8Array[]): Int8Array {
  const y = new Int8Array(s.y.size), x = xs[0];
  switch (s.kind) {
    case 'conv': conv(s.p, x, y); break;
    case 'dense': dense(s.p, x, y); break;
    case 'maxpool': maxpool(s.p, x, y); break;
    case 'avgpool': avgpool(s.p, x, y); break;
    case 'rescale': rescale(s.p, x, y); break;
    case 'copy': y.set(x); break;
    case 'add': add(s.p, x, xs[1], y); break;
    case 'mul': mulKernel(s.p, x, xs[1], y); break;
    case 'lut': lut(s.p, x, y); break;
    case 'concat': concat(s.p, xs, y); break;
    case 'transpose': transpose(s.p, x, y); break;
    case 'slice': slice(s.p, x, y); break;
  }
  return y;
}

describe.skipIf(!GCC)('C kernels against the TypeScript reference', { timeout: 600_000 }, () => {
  it('conv (2-D, 1-D, grouped, depthwise), dense, max and average pooling, rescale, add and mul (same shape, scalar, per channel, along the last axes), activation tables, concat, transpose, split parts: every output byte equal', () => {
    const steps: Step[] = [];
    for (let j = 0; j < 60; j++) steps.push(convStep(j, false, false));
    for (let j = 60; j < 80; j++) steps.push(convStep(j, true, false));
    for (let j = 80; j < 100; j++) steps.push(convStep(j, rnd() < 0.3, true));
    for (let j = 100; j < 130; j++) steps.push(poolStep(j, false));
    for (let j = 130; j < 170; j++) steps.push(poolStep(j, true));
    for (let j = 170; j < 200; j++) steps.push(denseStep(j));
    for (let j = 200; j < 220; j++) steps.push(rescaleStep(j));
    for (let j = 220; j < 260; j++) steps.push(addStep(j));
    for (let j = 260; j < 290; j++) steps.push(mulStep(j));
    for (let j = 290; j < 310; j++) steps.push(lutStep(j));
    for (let j = 310; j < 335; j++) steps.push(concatStep(j));
    for (let j = 335; j < 360; j++) steps.push(transposeStep(j));
    for (let j = 360; j < 380; j++) steps.push(sliceStep(j));
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
    const xs = steps.map((s) => stepInputs(s).map((t) => i8(t.size)));
    const input = Buffer.concat(xs.flatMap((ins) => [Buffer.from(Int32Array.of(ins.length).buffer), ...ins.flatMap((x) => [Buffer.from(Int32Array.of(x.length).buffer), Buffer.from(x.buffer)])]));
    const run = spawnSync(exe, { input, maxBuffer: 1 << 26 });
    expect(run.status).toBe(0);
    const out = new Int8Array(run.stdout.buffer, run.stdout.byteOffset, run.stdout.length);
    expect(compare(steps, xs, out)).toBe(0);
    const kinds = [...new Set(steps.map((s) => s.kind))].map((k) => `${steps.filter((s) => s.kind === k).length} ${k}`).join(', ');
    console.log(`C kernels: ${steps.length} random cases (${kinds}), ${out.length} output bytes, all equal to the TypeScript reference`);
    built = { dir, steps, xs, input };
  });

  it.skipIf(!EMU)('the same cases through the DSP path (SXTB16/SMLAD) on the emulated m4f and m55: every output byte equal', async () => {
    expect(built).toBeDefined();
    const { dir, steps, xs, input } = built!;
    const [kern, fw] = firmwareSourceDirs();
    const file = path.join(dir, 'input.bin');
    fs.writeFileSync(file, input);
    // the same driver: under semihosting the cases come from a host file and go out as hex
    for (const core of ['m4f', 'm55']) {
      const m = await measureFirmware({ core, sources: [path.join(dir, 'offramp_net.c'), path.join(fw, 'offramp_run.c'), ...fs.readdirSync(kern).filter((f) => f.endsWith('.c')).map((f) => path.join(kern, f))], driverSources: [path.resolve(import.meta.dirname, 'helpers/c/kernel_main.c')], rowsC: `const char offramp_kernel_cases[] = ${cString(file)};\n`, defines: ['OFFRAMP_KERNEL_CASES'], includeDirs: [dir, kern, fw], trace: false });
      expect(m.exitCode, m.stderr).toBe(0);
      const out = Int8Array.from(Buffer.from(m.stdout.trim(), 'hex'));
      expect(compare(steps, xs, out), core).toBe(0);
      console.log(`C kernels on ${core} (DSP extension): ${steps.length} random cases, ${out.length} output bytes, all equal to the TypeScript reference`);
    }
  });
});

let built: { dir: string; steps: Step[]; xs: Int8Array[][]; input: Buffer } | undefined;

/** Cases whose output differs from the reference (printed). */
function compare(steps: Step[], xs: Int8Array[][], out: Int8Array): number {
    let at = 0, bad = 0;
    steps.forEach((s, j) => {
      const want = reference(s, xs[j]), got = out.subarray(at, at + want.length);
      at += want.length;
      if (!want.every((v, i) => v === got[i])) { bad++; console.log(`step ${j} (${s.kind}) differs: ${JSON.stringify({ ...s.p, weight: undefined, bias: undefined, mul: undefined, table: undefined })}`); }
    });
    return at === out.length ? bad : bad + 1;
}

// emit-c: the C (the library in lib/emit/c and the generated tables), compiled with gcc,
// decides exactly as lib/policy does. A harness (C main below) reads an exit cache
// (samples × (exits+1) × classes, float32 or int8 with per-exit scale and zero point), runs the
// emitted offramp_policy both through the whole-sample functions and stage by stage as a
// firmware would, and writes its decisions; every one must equal the TypeScript's. Thresholds
// are scores and distances of the data itself, as the tuner's are, so exact ties with the
// threshold are common; the data holds exact and one-ulp logit ties, uniform vectors and exp
// underflow. The C's float exp, log and sqrt are checked bit for bit against lib/policy's
// (whose accuracy against Math.exp / Math.log policy.test.ts measures). The C holds no double
// and needs no libm (linked without -lm); it compiles warning-free as C99 with the host gcc and
// with arm-none-eabi-gcc for a Cortex-M4F.
import { spawn, spawnSync } from 'node:child_process';
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { describe, it, expect, afterAll } from 'vitest';
import { mulberry32 } from '../lib/graph/build.js';
import {
  chainFor, confidence, distance, DISTANCES, entropy, fullModel, margin, runFrame, softmax, streamStart, streamStep, worstCase,
  type DistanceKind, type ExitView, type FramePolicy, type Policy, type StreamPolicy,
} from '../lib/policy/index.js';
import { exp32, log32, sqrt32 } from '../lib/policy/f32.js';
import { emitC, hexDouble, hexFloat, cString, C_FILES } from '../lib/emit/c.js';
import { chainTable } from '../lib/emit/table.js';
import { planArena } from '../lib/cost/arena.js';
import type { LiveValue } from '../lib/cost/memory.js';
import type { Manifest, ManifestTensor } from '../lib/split/manifest.js';
import { main } from '../lib/cli/main.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import { measureFirmware } from '../lib/measure/measure.js';

const GCC = spawnSync('gcc', ['--version']).status === 0;
if (!GCC && process.env.CI) throw new Error('gcc is missing: the emit-c tests need it under CI');
const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-emitc-'));
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
// -ffp-contract=off is -std=c99's default with gcc (ISO C: no fused multiply-add); said explicitly.
// -Wdouble-promotion: a float silently widened to double (an unsuffixed constant, say) is an error.
const CFLAGS = ['-std=c99', '-Wall', '-Wextra', '-Werror', '-pedantic', '-O2', '-ffp-contract=off', '-Wdouble-promotion'];
const ARM_GCC = spawnSync('arm-none-eabi-gcc', ['--version']).status === 0;
if (!ARM_GCC && process.env.CI) throw new Error('arm-none-eabi-gcc is missing: the Cortex-M4F compile needs it under CI');
const EMU = toolchainStatus().ready;
if (!EMU && process.env.CI) throw new Error(`the emulated Cortex-M4F decisions need the toolchain under CI: ${toolchainStatus().message}`);

const E = 3, C = 10, E1 = E + 1;

// ---- a split manifest: 4 stages, exit-k made by stage k, the final output by the last
function manifest(policy?: Policy): Manifest {
  const t = (name: string, shape: number[]): ManifestTensor => ({ name, dtype: 'float32', shape, bytes: shape.reduce((a, d) => a * d, 1) * 4 });
  return {
    schema: 'offramp-manifest/1', source: { file: '../model.onnx', sha256: '0'.repeat(64) }, order: 'file',
    inputs: [t('input', [1, 1, 32, 32])],
    outputs: [t('logits', [1, C]), ...Array.from({ length: E }, (_, k) => t(`exit-${k}`, [1, C]))],
    stages: Array.from({ length: E1 }, (_, i) => ({
      index: i, file: `stage-${i}.onnx`, sha256: '0'.repeat(64), nodes: 7,
      inputs: [{ ...t(i ? `h${i}` : 'input', i ? [1, 8, 16, 16] : [1, 1, 32, 32]), from: i ? i - 1 : ('input' as const) }],
      outputs: i < E
        ? [{ ...t(`h${i + 1}`, [1, 8, 16, 16]), to: [i + 1], modelOutput: false }, { ...t(`exit-${i}`, [1, C]), to: [], modelOutput: true }]
        : [{ ...t('logits', [1, C]), to: [], modelOutput: true }],
      exits: i < E ? [`exit-${i}`] : [], cut: i < E ? [`h${i + 1}`] : [],
      macs: 50_000 * (i + 1) + 1_000, macFraction: 0, weightBytes: 2048 * (i + 1), peakActivationBytes: 16384, handoverBytes: i < E ? 8192 : 0,
    })),
    sharedWeights: [], totals: { macs: 0, weightBytes: 0, stageWeightBytes: 0 },
    ...(policy && { policy: { rule: policy, tuned: { maxDrop: 1, labelled: true, samples: 1, accuracy: 1, fullAccuracy: 1, meanMacs: 1, fullMacs: 1, exitShare: [1] } } }),
  };
}
const reach = chainTable(manifest()).reach.map(Number);

// ---- data: float32 logits, then their int8 quantisation and its float32 dequantisation
interface Cache { n: number; z: Float32Array }
function frames(n: number, seed: number, stream: boolean): Cache {
  const rnd = mulberry32(seed);
  const gauss = () => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const z = new Float32Array(n * E1 * C);
  let y = 0, hard = 0, noise = 1, left = 0;
  const base = new Float64Array(E1 * C);
  for (let i = 0; i < n; i++) {
    if (!stream || left-- <= 0) {
      y = Math.floor(rnd() * C); hard = rnd(); noise = stream ? 0.02 + 0.3 * rnd() : 1; left = 5 + Math.floor(rnd() * 60);
      for (let j = 0; j < base.length; j++) base[j] = gauss();
    }
    const special = i % 11;
    for (let k = 0; k < E1; k++) {
      const o = (i * E1 + k) * C;
      const scale = special === 4 ? 40 : 1;
      for (let c = 0; c < C; c++) z[o + c] = scale * (stream ? base[k * C + c] + noise * gauss() : gauss());
      z[o + y] += scale * (6 * (k + 1) / E1 - 4 * hard + 1);
      if (special === 0) z[o + (y + 1) % C] = z[o + y];                                   // exact tie
      if (special === 1) z[o + (y + 3) % C] = z[o + y] - ulp32(z[o + y]);                  // one-ulp near tie
      if (special === 2 && k === 1) z.fill(z[o], o, o + C);                                // uniform
      if (special === 3 && k > 0) z.copyWithin(o, o - C, o);                               // same prediction at every exit
    }
    if (stream && special === 5 && i > 0) z.copyWithin(i * E1 * C, (i - 1) * E1 * C, i * E1 * C);  // a repeated frame: distance 0
  }
  return { n, z };
}
function ulp32(x: number): number {
  const b = new Float32Array([x]), u = new Uint32Array(b.buffer);
  u[0] += 1;
  return Math.abs(b[0] - x) || 1e-45;
}
interface Q8 { q: Int8Array; scale: Float32Array; zp: Int32Array; deq: Float32Array }
function quantise(c: Cache): Q8 {
  const scale = new Float32Array(E1), zp = new Int32Array(E1);
  for (let k = 0; k < E1; k++) {
    let lo = Infinity, hi = -Infinity;
    for (let i = 0; i < c.n; i++) for (let j = 0; j < C; j++) { const v = c.z[(i * E1 + k) * C + j]; lo = Math.min(lo, v); hi = Math.max(hi, v); }
    scale[k] = Math.fround((hi - lo) / 255 / 4);  // clip the tails: more saturation, more ties
    zp[k] = k - 2;
  }
  const q = new Int8Array(c.z.length), deq = new Float32Array(c.z.length);
  for (let i = 0; i < c.z.length; i++) {
    const k = Math.floor(i / C) % E1;
    q[i] = Math.max(-128, Math.min(127, Math.round(c.z[i] / scale[k]) + zp[k]));
    deq[i] = Math.fround((q[i] - zp[k]) * scale[k]);  // ONNX DequantizeLinear, in float32
  }
  return { q, scale, zp, deq };
}

const view = (z: Float32Array, i: number): ExitView => ({ data: () => z, offset: (k) => (i * E1 + k) * C });

// ---- the TypeScript's decisions
function expectFrame(p: FramePolicy, z: Float32Array, n: number): Int32Array {
  const ch = chainFor(p, reach, E, C);
  const out = new Int32Array(n * 2);
  for (let i = 0; i < n; i++) { const r = runFrame(p, ch, view(z, i)); out[2 * i] = r.exit; out[2 * i + 1] = r.label; }
  return out;
}
function expectStream(p: StreamPolicy, z: Float32Array, n: number): Int32Array {
  const ch = chainFor(p.then ?? fullModel(E), reach, E, C);
  const s = streamStart(C);
  const out = new Int32Array(n * 4);
  for (let i = 0; i < n; i++) {
    const r = streamStep(p, s, view(z, i), ch);
    out.set([r.exit, r.label, r.reused ? 1 : 0, r.scene], 4 * i);
  }
  return out;
}

// ---- thresholds taken from the data, as the tuner takes them
const quantiles = (v: number[], qs: number[]) => { const s = [...v].sort((a, b) => a - b); return qs.map((q) => s[Math.min(s.length - 1, Math.floor(q * s.length))]); };
function scoreThresholds(kind: 'confidence' | 'entropy' | 'margin', zs: Float32Array[], n: number, qs: number[][]): (number | null)[][] {
  const f = kind === 'confidence' ? confidence : kind === 'margin' ? margin : entropy;
  return qs.map((set) => set.map((q, k) => {
    if (q < 0) return null;
    const v: number[] = [];
    for (const z of zs) for (let i = 0; i < n; i++) v.push(f(z, (i * E1 + k) * C, C));
    return quantiles(v, [q])[0];
  }));
}
function distanceThresholds(kind: DistanceKind, zs: Float32Array[], n: number, k: number, qs: number[]): number[] {
  const a = new Float32Array(C), b = new Float32Array(C), v: number[] = [];
  for (const z of zs) for (let i = 1; i < n; i++) {
    softmax(z, ((i - 1) * E1 + k) * C, C, a); softmax(z, (i * E1 + k) * C, C, b);
    v.push(distance(kind, b, a, C));
  }
  return quantiles(v.filter(Number.isFinite), qs);
}

// ---- the harness: decisions through the whole-sample API and stage by stage
const HARNESS = `#include <stdio.h>
#include <stdlib.h>
#include "offramp_policy.h"
#define E OFFRAMP_EXITS
#define C OFFRAMP_CLASSES
static void put(FILE *f, int32_t v) { fwrite(&v, 4, 1, f); }
int main(int argc, char **argv) {
  FILE *in, *out;
  int32_t n, i, k, j;
  int q8;
  offramp_q8_t qp[E + 1];
  float *zf = NULL; int8_t *zq = NULL;
#if OFFRAMP_POLICY_STREAM
  offramp_stream_t s1, s2;
#endif
  if (argc != 4) return 2;
  q8 = argv[1][0] == 'q';
  in = fopen(argv[2], "rb"); out = fopen(argv[3], "wb");
  if (!in || !out || fread(&n, 4, 1, in) != 1) return 3;
  if (q8) {
    for (k = 0; k <= E; k++) if (fread(&qp[k].scale, 4, 1, in) != 1 || fread(&qp[k].zero_point, 4, 1, in) != 1) return 3;
    zq = malloc((size_t)n * (E + 1) * C);
    if (!zq || fread(zq, 1, (size_t)n * (E + 1) * C, in) != (size_t)n * (E + 1) * C) return 3;
  } else {
    zf = malloc((size_t)n * (E + 1) * C * 4);
    if (!zf || fread(zf, 4, (size_t)n * (E + 1) * C, in) != (size_t)n * (E + 1) * C) return 3;
  }
#if OFFRAMP_POLICY_STREAM
  offramp_stream_start(&s1); offramp_stream_start(&s2);
#endif
  for (i = 0; i < n; i++) {
    const float *z[E + 1];
    const int8_t *q[E + 1];
    for (k = 0; k <= E; k++) { z[k] = zf ? zf + ((size_t)i * (E + 1) + k) * C : NULL; q[k] = zq ? zq + ((size_t)i * (E + 1) + k) * C : NULL; }
#if OFFRAMP_POLICY_STREAM
    {
      const offramp_stream_policy_t *p = &offramp_policy;
      offramp_stream_result_t r = q8 ? offramp_stream_step_q8(p, &s1, q, qp) : offramp_stream_step(p, &s1, z);
      int32_t c = offramp_stream_compare_exit(p, &s2), label;
      int tested = 0, forced = offramp_stream_refresh_due(p, &s2);
      put(out, r.exit); put(out, r.label); put(out, r.reused); put(out, r.scene);
      if (s2.scene >= 0 && !forced) {
        if (q8 ? offramp_stream_test_q8(p, &s2, q[c], qp[c]) : offramp_stream_test(p, &s2, z[c])) {
          put(out, c); put(out, s2.label); put(out, 1); put(out, s2.scene);
          continue;
        }
        tested = 1;
      }
      {
        offramp_frame_t f;
        offramp_frame_start(&f);
        for (j = c > 0 ? c : 0; j < E; j++) if (!forced && (q8 ? offramp_decide_q8(&p->then, &f, j, q[j], qp[j]) : offramp_decide(&p->then, &f, j, z[j]))) break;
      }
      label = q8 ? offramp_argmax_q8(q[j]) : offramp_argmax(z[j]);
      if (q8) offramp_stream_open_q8(p, &s2, q, qp, j, label, tested); else offramp_stream_open(p, &s2, z, j, label, tested);
      put(out, j > c ? j : c); put(out, label); put(out, 0); put(out, s2.scene);
    }
#else
    {
      offramp_result_t r = q8 ? offramp_run_frame_q8(&offramp_policy, q, qp, 0) : offramp_run_frame(&offramp_policy, z, 0);
      offramp_frame_t f;
      put(out, r.exit); put(out, r.label);
      offramp_frame_start(&f);
      for (j = 0; j < E; j++) if (q8 ? offramp_decide_q8(&offramp_policy, &f, j, q[j], qp[j]) : offramp_decide(&offramp_policy, &f, j, z[j])) break;
      put(out, j); put(out, q8 ? offramp_argmax_q8(q[j]) : offramp_argmax(z[j]));
    }
#endif
  }
  free(zf); free(zq);
  return fclose(out) ? 4 : 0;
}
`;

function run(cmd: string, args: string[], cwd: string): Promise<void> {
  return new Promise((resolve, reject) => {
    const c = spawn(cmd, args, { cwd, stdio: ['ignore', 'ignore', 'pipe'] });
    let err = '';
    c.stderr.on('data', (d) => { err += d; });
    c.on('close', (code) => (code === 0 ? resolve() : reject(new Error(`${cmd} ${args.join(' ')} (in ${cwd}) exited ${code}\n${err}`))));
  });
}
async function pool<T>(items: T[], f: (x: T, i: number) => Promise<void>): Promise<void> {
  let next = 0;
  await Promise.all(Array.from({ length: Math.max(1, os.cpus().length) }, async () => { while (next < items.length) { const i = next++; await f(items[i], i); } }));
}

function writeInputs(dir: string, c: Cache, q: Q8): void {
  const head = new Int32Array([c.n]);
  fs.writeFileSync(path.join(dir, 'f32.bin'), Buffer.concat([Buffer.from(head.buffer), Buffer.from(c.z.buffer)]));
  const qp = Buffer.alloc(E1 * 8);
  for (let k = 0; k < E1; k++) { qp.writeFloatLE(q.scale[k], 8 * k); qp.writeInt32LE(q.zp[k], 8 * k + 4); }
  fs.writeFileSync(path.join(dir, 'q8.bin'), Buffer.concat([Buffer.from(head.buffer), qp, Buffer.from(q.q.buffer)]));
}

const label = (p: Policy) => JSON.stringify(p);

describe.skipIf(!GCC)('emit-c against lib/policy', () => {
  const N = 4400, NS = 3300;
  const val = frames(N, 11, false), valQ = quantise(val);
  const str = frames(NS, 12, true), strQ = quantise(str);

  // per-frame policies
  const frame: FramePolicy[] = [];
  const QS = [[0.3, 0.5, 0.7], [0.5, -1, 0.2], [0.9, 0.9, 0.9], [0, 0.5, 1 - 1e-9]];
  for (const kind of ['confidence', 'entropy', 'margin'] as const)
    for (const th of scoreThresholds(kind, [val.z, valQ.deq], N, QS)) frame.push({ kind, thresholds: th });
  for (const patience of [1, 2, 3, 4]) frame.push({ kind: 'patience', thresholds: [], patience });
  const worst = worstCase({ kind: 'budget', thresholds: [], budget: 0 }, reach, E, C);
  for (const k of [0, 1, 2, 3]) frame.push({ kind: 'budget', thresholds: [], budget: worst[k] });
  frame.push({ kind: 'budget', thresholds: [], budget: worst[1] - 1 });
  for (const [i, score] of (['confidence', 'entropy', 'margin'] as const).entries()) {
    const th = scoreThresholds(score, [val.z, valQ.deq], N, [[0.4, 0.6, 0.8]])[0];
    const p: FramePolicy = { kind: 'budget', thresholds: th, budget: 0, score };
    p.budget = worstCase(p, reach, E, C)[1 + i];
    frame.push(p);
  }

  // stream policies: every distance, difference at every exit (the final output too), agreeing; several `then`s
  // and refresh periods (none, every frame, short and long), a budget `then` with a refresh that overrides its cap
  const thens: (FramePolicy | undefined)[] = [undefined, frame[0], frame[13], frame[17], frame[22]];
  const refreshes: (number | undefined)[] = [undefined, 4, 1, 9, undefined, 25, 2];
  const stream: StreamPolicy[] = [];
  let t = 0;
  for (const d of DISTANCES) {
    for (const exit of [0, 1, 2, 3]) {
      const [tau] = distanceThresholds(d, [str.z, strQ.deq], NS, exit, [0.3 + 0.15 * exit]);
      const then = thens[t++ % thens.length];
      const refresh = refreshes[t % refreshes.length];
      stream.push({ kind: 'difference', thresholds: [tau], distance: d, exit, ...(then && { then }), ...(refresh && { refresh }) });
    }
    for (const q of [0.25, 0.6]) {
      const [tau] = distanceThresholds(d, [str.z, strQ.deq], NS, 0, [q]);
      const then = thens[t++ % thens.length];
      const refresh = refreshes[t % refreshes.length];
      stream.push({ kind: 'agreeing', thresholds: [tau], distance: d, ...(then && { then }), ...(refresh && { refresh }) });
    }
  }

  it('the data holds what the checks need: exact threshold ties, logit ties, reuse and scene changes', () => {
    let atThreshold = 0;
    for (const p of frame.slice(0, 12) as { kind: 'confidence' | 'entropy' | 'margin'; thresholds: (number | null)[] }[]) {
      const f = p.kind === 'confidence' ? confidence : p.kind === 'margin' ? margin : entropy;
      for (let i = 0; i < N; i++) for (let k = 0; k < E; k++) if (f(val.z, (i * E1 + k) * C, C) === p.thresholds[k]) atThreshold++;
    }
    expect(atThreshold).toBeGreaterThan(20);
    const e = expectStream({ ...stream[1], refresh: undefined }, str.z, NS);
    let reused = 0;
    for (let i = 0; i < NS; i++) reused += e[4 * i + 2];
    expect(reused).toBeGreaterThan(NS * 0.1);
    expect(e[4 * (NS - 1) + 3]).toBeGreaterThan(50);
    // a refresh of 9: never more than 8 frames in a row short of the final output, and it cuts runs that reuse would make longer
    const r9 = expectStream({ ...stream[1], refresh: 9 }, str.z, NS);
    let run = 0, longest = 0, longestBefore = 0;
    for (let i = 0; i < NS; i++) {
      run = r9[4 * i] === E ? 0 : run + 1; longest = Math.max(longest, run);
    }
    run = 0;
    for (let i = 0; i < NS; i++) { run = e[4 * i] === E ? 0 : run + 1; longestBefore = Math.max(longestBefore, run); }
    expect(longest).toBeLessThanOrEqual(8);
    expect(longestBefore).toBeGreaterThan(8);
    expect(stream.filter((p) => p.refresh && p.refresh > 1 && p.then?.kind === 'budget').length).toBeGreaterThan(0);
  });

  it('every policy kind and distance: identical decisions on float32 and int8 logits, whole-sample and stage by stage', async () => {
    const dir = path.join(tmp, 'parity');
    fs.mkdirSync(dir, { recursive: true });
    const vdir = path.join(dir, 'val'), sdir = path.join(dir, 'stream');
    fs.mkdirSync(vdir); fs.mkdirSync(sdir);
    writeInputs(vdir, val, valQ);
    writeInputs(sdir, str, strQ);
    const all: Policy[] = [...frame, ...stream];
    const emitted = (p: Policy) => emitC({ manifest: manifest(), manifestName: 'manifest.json', manifestSha256: '0'.repeat(64), policy: p, policyFrom: 'test' }).files;
    // the harness and the library once per header shape (frame, stream); the generated tables per policy
    for (const [name, p] of [['h-frame', frame[0]], ['h-stream', stream[0]]] as const) {
      const h = path.join(dir, name);
      fs.mkdirSync(h);
      for (const f of emitted(p)) fs.writeFileSync(path.join(h, f.name), f.text);
      fs.writeFileSync(path.join(h, 'harness.c'), HARNESS);
      await run('gcc', [...CFLAGS, '-c', 'harness.c', '-o', 'harness.o'], h);
      await run('gcc', [...CFLAGS, '-c', 'offramp_decide.c', '-o', 'offramp_decide.o'], h);
    }
    const failures: string[] = [];
    await pool(all, async (p, i) => {
      const d = path.join(dir, `p${i}`);
      fs.mkdirSync(d);
      for (const f of emitted(p)) fs.writeFileSync(path.join(d, f.name), f.text);
      const isStream = p.kind === 'difference' || p.kind === 'agreeing';
      const h = path.join(dir, isStream ? 'h-stream' : 'h-frame');
      // no -lm: the decision code needs no libm
      await run('gcc', [...CFLAGS, 'offramp_policy.c', path.join(h, 'harness.o'), path.join(h, 'offramp_decide.o'), '-o', 'h'], d);
      const data = isStream ? sdir : vdir;
      for (const mode of ['f32', 'q8'] as const) {
        await run(path.join(d, 'h'), [mode, path.join(data, `${mode}.bin`), path.join(d, `${mode}.out`)], d);
        const b = fs.readFileSync(path.join(d, `${mode}.out`));
        const got = new Int32Array(b.buffer, b.byteOffset, b.length / 4);
        const z = isStream ? (mode === 'f32' ? str.z : strQ.deq) : (mode === 'f32' ? val.z : valQ.deq);
        const n = isStream ? NS : N, w = isStream ? 4 : 2;
        const want = isStream ? expectStream(p as StreamPolicy, z, n) : expectFrame(p as FramePolicy, z, n);
        expect(got.length).toBe(n * 2 * w);
        for (let s = 0; s < n; s++) for (const half of [0, 1]) for (let j = 0; j < w; j++) {
          if (got[(2 * s + half) * w + j] !== want[s * w + j]) {
            failures.push(`${label(p)} ${mode} ${half ? 'staged' : 'whole'} sample ${s}: C [${[...got.subarray((2 * s + half) * w, (2 * s + half + 1) * w)]}] vs TS [${[...want.subarray(s * w, (s + 1) * w)]}]`);
            break;
          }
        }
      }
    });
    expect(failures.slice(0, 10)).toEqual([]);
  }, 300_000);

  it('offramp_exp, offramp_log and offramp_sqrt equal lib/policy\'s exp32, log32 and sqrt32 bit for bit', async () => {
    const d = path.join(tmp, 'explog');
    fs.mkdirSync(d);
    for (const f of emitC({ manifest: manifest(), manifestName: 'm', manifestSha256: '0', policy: frame[0], policyFrom: 'test' }).files) fs.writeFileSync(path.join(d, f.name), f.text);
    fs.writeFileSync(path.join(d, 'explog.c'), `#include <stdio.h>
#include "offramp_decide.h"
int main(int argc, char **argv) {
  FILE *in = fopen(argv[1], "rb"), *out = fopen(argv[2], "wb");
  float x, r[3];
  if (argc != 3 || !in || !out) return 2;
  while (fread(&x, 4, 1, in) == 1) { r[0] = offramp_exp(x); r[1] = offramp_log(x); r[2] = offramp_sqrt(x); fwrite(r, 4, 3, out); }
  return fclose(out) ? 3 : 0;
}
`);
    // random bit patterns (every exponent, subnormals, NaNs and infinities among them), the softmax's range
    // (−30 … 0), near 1 for log, integers and reciprocals, the edges of exp's range
    const rnd = mulberry32(5);
    const u = new Uint32Array(1), f = new Float32Array(u.buffer);
    const xs: number[] = [];
    for (let i = 0; i < 60000; i++) {
      u[0] = Math.floor(rnd() * 2 ** 32);
      xs.push(f[0], -30 * rnd(), -110 * rnd(), 2 * rnd() - 1, 1 + (rnd() - 0.5) * 1e-3, 200 * rnd() - 100);
    }
    for (let i = 1; i <= 2000; i++) xs.push(i, 1 / i, -i / 7);
    xs.push(0, -0, 1, -1, Infinity, -Infinity, NaN, 88.72283, 88.7229, -87.33654, -103.9720, -103.9721, 2 ** -149, 2 ** -126, 3.4028234663852886e38);
    const x32 = Float32Array.from(xs);
    fs.writeFileSync(path.join(d, 'x.bin'), x32);
    await run('gcc', [...CFLAGS, 'explog.c', 'offramp_decide.c', '-o', 'explog'], d);
    await run(path.join(d, 'explog'), ['x.bin', 'r.bin'], d);
    const b = fs.readFileSync(path.join(d, 'r.bin'));
    const r = new Float32Array(b.buffer, b.byteOffset, b.length / 4);
    expect(r.length).toBe(3 * x32.length);
    const bad: string[] = [];
    x32.forEach((x, i) => {
      for (const [j, g] of [[0, exp32], [1, log32], [2, sqrt32]] as const) {
        const want = g(x), got = r[3 * i + j];
        if (!(Object.is(got, want) || (Number.isNaN(got) && Number.isNaN(want)))) bad.push(`${['exp', 'log', 'sqrt'][j]}(${x}) = ${got}, lib/policy ${want}`);
      }
    });
    expect(bad.slice(0, 5)).toEqual([]);
  }, 30_000);

  // The same C on the emulated Cortex-M4F (QEMU mps2-an386): its FPU computes the float operations (vsqrt.f32
  // for the square root), so this checks the target's arithmetic, subnormals included, against lib/policy.
  it.runIf(EMU)('on the emulated Cortex-M4F: exp, log, sqrt and the decisions of every kind and distance equal lib/policy', async () => {
    const d = path.join(tmp, 'm4f-run');
    fs.mkdirSync(d);
    const n = N, ns = NS;   // every frame: thresholds sit on scores of the data, so ties are spread through it
    const head = (k: number) => Buffer.from(new Int32Array([k]).buffer);
    const qpBytes = (q: Q8) => { const b = Buffer.alloc(E1 * 8); for (let k = 0; k < E1; k++) { b.writeFloatLE(q.scale[k], 8 * k); b.writeInt32LE(q.zp[k], 8 * k + 4); } return b; };
    const inputs = (name: string, c: Cache, q: Q8, m: number) => {
      fs.writeFileSync(path.join(d, `${name}-f32.bin`), Buffer.concat([head(m), Buffer.from(c.z.buffer, 0, m * E1 * C * 4)]));
      fs.writeFileSync(path.join(d, `${name}-q8.bin`), Buffer.concat([head(m), qpBytes(q), Buffer.from(q.q.buffer, 0, m * E1 * C)]));
    };
    inputs('val', val, valQ, n);
    inputs('str', str, strQ, ns);
    const rnd = mulberry32(9);
    const u = new Uint32Array(1), f = new Float32Array(u.buffer), xs: number[] = [];
    for (let i = 0; i < 4000; i++) { u[0] = Math.floor(rnd() * 2 ** 32); xs.push(f[0], -30 * rnd(), -110 * rnd(), 2 * rnd()); }
    xs.push(0, -0, 1, Infinity, -Infinity, NaN, 2 ** -149, 2 ** -130, -100, 88.72283);
    const x32 = Float32Array.from(xs);
    fs.writeFileSync(path.join(d, 'x.bin'), x32);
    const harness = HARNESS.replace('int main(int argc, char **argv) {', 'static int run_harness(int argc, char **argv) {');
    const driver = (data: string, out: string) => `${harness}
int main(void) {
  char a0[] = "h", f[] = "f", q[] = "q", fi[] = "${data}-f32.bin", qi[] = "${data}-q8.bin", fo[] = "${out}-f32.out", qo[] = "${out}-q8.out";
  char *af[] = { a0, f, fi, fo }, *aq[] = { a0, q, qi, qo };
  FILE *in = fopen("${path.join(d, 'x.bin')}", "rb"), *o = fopen("${out}-x.out", "wb");
  float x, r[3];
  if (!in || !o) return 5;
  while (fread(&x, 4, 1, in) == 1) { r[0] = offramp_exp(x); r[1] = offramp_log(x); r[2] = offramp_sqrt(x); fwrite(r, 4, 3, o); }
  if (fclose(o)) return 6;
  return run_harness(4, af) || run_harness(4, aq);
}
`;
    // one of each kind (frame: confidence, entropy, margin, patience, a budget, a budget with a score) and each distance
    const some: Policy[] = [frame[0], frame[4], frame[8], frame[13], frame[17], frame[21], stream[0], stream[4], stream[7], stream[13], stream[18], stream[22]];
    const bad: string[] = [];
    for (const [i, p] of some.entries()) {
      const src = path.join(d, `p${i}`);
      fs.mkdirSync(src);
      for (const file of emitC({ manifest: manifest(), manifestName: 'm', manifestSha256: '0', policy: p, policyFrom: 'test' }).files) fs.writeFileSync(path.join(src, file.name), file.text);
      const isStream = p.kind === 'difference' || p.kind === 'agreeing';
      const out = path.join(d, `o${i}`);
      fs.writeFileSync(path.join(src, 'main.c'), driver(path.join(d, isStream ? 'str' : 'val'), out));
      const m = await measureFirmware({ core: 'm4f', sources: [path.join(src, 'offramp_decide.c'), path.join(src, 'offramp_policy.c')], driverSources: [path.join(src, 'main.c')], includeDirs: [src], trace: false, cflags: ['-Werror', '-Wdouble-promotion'] });
      expect(m.exitCode, `${label(p)}: ${m.stderr}`).toBe(0);
      if (i === 0) {
        const b = fs.readFileSync(`${out}-x.out`), r = new Float32Array(b.buffer, b.byteOffset, b.length / 4);
        expect(r.length).toBe(3 * x32.length);
        x32.forEach((x, j) => [exp32, log32, sqrt32].forEach((g, w) => {
          const want = g(x), got = r[3 * j + w];
          if (!(Object.is(got, want) || (Number.isNaN(got) && Number.isNaN(want)))) bad.push(`${['exp', 'log', 'sqrt'][w]}(${x}) = ${got} on the M4F, lib/policy ${want}`);
        }));
      }
      for (const mode of ['f32', 'q8'] as const) {
        const b = fs.readFileSync(`${out}-${mode}.out`), got = new Int32Array(b.buffer, b.byteOffset, b.length / 4);
        const z = isStream ? (mode === 'f32' ? str.z : strQ.deq) : (mode === 'f32' ? val.z : valQ.deq);
        const k = isStream ? ns : n, w = isStream ? 4 : 2;
        const want = isStream ? expectStream(p as StreamPolicy, z, k) : expectFrame(p as FramePolicy, z, k);
        expect(got.length).toBe(k * 2 * w);
        for (let s = 0; s < k; s++) for (const half of [0, 1]) for (let j = 0; j < w; j++)
          if (got[(2 * s + half) * w + j] !== want[s * w + j]) { bad.push(`${label(p)} ${mode} ${half ? 'staged' : 'whole'} frame ${s} on the M4F`); s = k; break; }
      }
    }
    expect(bad.slice(0, 10)).toEqual([]);
  }, 300_000);
});

describe('emit-c output', () => {
  it('hex constants are the exact doubles; C strings escape quotes, trigraphs and non-ASCII', () => {
    // C99 6.4.4.2 hexadecimal floating constants; values checked against their IEEE bits
    expect(hexDouble(0.9)).toBe('0x1.ccccccccccccdp-1');
    expect(hexDouble(1)).toBe('0x1p0');
    expect(hexDouble(-0.5)).toBe('-0x1p-1');
    expect(hexDouble(5e-324)).toBe('0x0.0000000000001p-1022');
    expect(hexDouble(0)).toBe('0.0');
    // float constants: float32 0.1 is 0x3dcccccd (IEEE 754 binary32), the least subnormal 2^-149
    expect(hexFloat(0.1)).toBe('0x1.99999ap-4f');
    expect(hexFloat(1)).toBe('0x1p0f');
    expect(hexFloat(-0.75)).toBe('-0x1.8p-1f');
    expect(hexFloat(2 ** -149)).toBe('0x0.000002p-126f');
    expect(hexFloat(0)).toBe('0.0f');
    expect(cString('a"b\\c??=é')).toBe('"a\\042b\\134c\\077\\077=\\303\\251"');
  });

  it('the stage table, exits and reach follow the manifest; the banner names it and its sha256', () => {
    const out = emitC({ manifest: manifest(), manifestName: '../split/manifest.json', manifestSha256: 'ab'.repeat(32), policy: { kind: 'confidence', thresholds: [0.5, null, 0.25] }, policyFrom: 'the manifest' });
    const [h, c, cfg] = out.files;
    expect(out.files.map((f) => f.name)).toEqual([...C_FILES]);
    expect(h.name).toBe('offramp_policy.h');
    expect(cfg.text).toContain(`manifest: ../split/manifest.json (sha256 ${'ab'.repeat(32)})`);
    expect(h.text).toContain(`manifest: ../split/manifest.json (sha256 ${'ab'.repeat(32)})`);
    expect(cfg.text).toContain('#define OFFRAMP_EXITS 3');
    expect(cfg.text).toContain('#define OFFRAMP_CLASSES 10');
    expect(h.text).toContain('#define OFFRAMP_POLICY_STREAM 0');
    // A manifest without arena plans (written before them): arena 0, no buffers, no offsets.
    expect(c.text).toContain('{ "stage-1.onnx", UINT64_C(101000), 3u, 1u, 4u, 2u, 2048u, 8192u, 2058u, 8232u, 4096u, 16384u, 0u, 0u, 0u, 1, 1 },');
    expect(c.text).toContain('{ "h1", "float32", 2048u, 8192u, OFFRAMP_NO_OFFSET },');
    expect(h.text).toContain('#define OFFRAMP_BUFFERS 0');
    // reach: stages 0..k summed, 51 000 + 101 000 + …
    expect(c.text).toContain('offramp_reach[OFFRAMP_EXITS + 1] = { UINT64_C(51000), UINT64_C(152000), UINT64_C(303000), UINT64_C(504000) }');
    // one slot per exit and one for the final output; thresholds as the floats the C compares
    expect(c.text).toContain('{ 1, 0, 1, 0 },\n  { 0x1p-1f /* 0.5 */, 0.0f, 0x1p-2f /* 0.25 */, 0.0f }');
    const third = emitC({ manifest: manifest(), manifestName: 'm', manifestSha256: '0', policy: { kind: 'margin', thresholds: [0.1, null, null] }, policyFrom: 't' }).files[1].text;
    expect(third).toContain('{ 0x1.99999ap-4f /* 0.1 as float */, 0.0f, 0.0f, 0.0f }');
    expect(c.text).not.toMatch(/\d{4}-\d\d-\d\dT/);
  });

  it.runIf(GCC)('arena plans reach the C table: firmware finds every tensor\'s offset, and live buffers never share bytes', async () => {
    // Each stage: its input (from node 0), two intermediates, its outputs (to the last node), planned by planArena.
    const m = manifest();
    for (const s of m.stages) {
      const ranges: LiveValue[] = [
        ...s.inputs.map((t) => ({ name: t.name, bytes: BigInt(t.bytes), birth: -1, death: 1 })),
        { name: `a${s.index}`, bytes: 32768n, birth: 0, death: 2 }, { name: `b${s.index}`, bytes: 12345n, birth: 2, death: 4 },
        ...s.outputs.map((t, j) => ({ name: t.name, bytes: BigInt(t.bytes), birth: 4 + j, death: 6 })),
      ];
      const p = planArena(ranges, { from: 0, to: 6 });
      s.arenaBytes = Number(p.bytes);
      s.arena = { align: p.align, method: p.method, buffers: p.slots.map((b) => ({ name: b.name, offset: Number(b.offset), bytes: Number(b.bytes), first: b.birth, last: b.death })) };
    }
    const d = path.join(tmp, 'arena');
    fs.mkdirSync(d);
    const out = emitC({ manifest: m, manifestName: 'm', manifestSha256: '0', policy: { kind: 'confidence', thresholds: [0.5, 0.5, 0.5] }, policyFrom: 'test' });
    for (const f of out.files) fs.writeFileSync(path.join(d, f.name), f.text);
    expect(out.files[0].text).toContain(`#define OFFRAMP_ARENA_BYTES ${Math.max(...m.stages.map((s) => s.arenaBytes!))}u`);
    expect(out.files[0].text).toContain('#define OFFRAMP_ARENA_ALIGN 16u');
    // The firmware's view, in C: every stage tensor has its buffer at the same offset; buffers fit the stage's
    // arena and OFFRAMP_ARENA_BYTES, are aligned, and two buffers whose node spans meet are disjoint.
    fs.writeFileSync(path.join(d, 'arena.c'), `#include <stdio.h>
#include <string.h>
#include "offramp_policy.h"
int main(void) {
  uint32_t s, i, j, bad = 0, pairs = 0;
  for (s = 0; s < OFFRAMP_STAGES; s++) {
    const offramp_stage_t *st = &offramp_stages[s];
    const offramp_buffer_t *b = &offramp_buffers[st->first_buffer];
    for (i = 0; i < st->inputs + st->outputs; i++) {
      const offramp_tensor_t *t = &offramp_tensors[st->first_input + i];
      int found = 0;
      for (j = 0; j < st->buffers; j++) if (!strcmp(b[j].name, t->name)) { found = 1; bad += b[j].offset != t->arena_offset || b[j].bytes != t->bytes; }
      bad += !found;
    }
    for (i = 0; i < st->buffers; i++) {
      bad += b[i].offset % OFFRAMP_ARENA_ALIGN != 0 || b[i].offset + b[i].bytes > st->arena_bytes || st->arena_bytes > OFFRAMP_ARENA_BYTES;
      for (j = i + 1; j < st->buffers; j++) {
        if (b[i].first > b[j].last || b[j].first > b[i].last) continue;
        pairs++;
        bad += !(b[i].offset + b[i].bytes <= b[j].offset || b[j].offset + b[j].bytes <= b[i].offset);
      }
    }
  }
  bad += offramp_buffers[OFFRAMP_BUFFERS].name != 0;
  printf("%u %u\\n", (unsigned)bad, (unsigned)pairs);
  return bad != 0;
}
`);
    await run('gcc', [...CFLAGS, 'arena.c', 'offramp_policy.c', 'offramp_decide.c', '-o', 'arena'], d);
    const r = spawnSync(path.join(d, 'arena'), { cwd: d, encoding: 'utf8' });
    expect(r.status).toBe(0);
    const [bad, pairs] = r.stdout.trim().split(' ').map(Number);
    expect(bad).toBe(0);
    expect(pairs).toBeGreaterThan(10);
  }, 30_000);

  // Every C file emit-c writes, for a frame policy, a stream policy and int8 logits (exit scales in the table).
  const cSets = () => {
    const q = manifest();
    for (const o of q.outputs) o.quant = { scale: 0.0625, zeroPoint: -3 };
    return [
      emitC({ manifest: manifest(), manifestName: 'm', manifestSha256: '0', policy: { kind: 'entropy', thresholds: [0.3, null, 0.2] }, policyFrom: 't' }).files,
      emitC({ manifest: manifest(), manifestName: 'm', manifestSha256: '0', policy: { kind: 'agreeing', thresholds: [0.05], distance: 'cosine', refresh: 8 }, policyFrom: 't' }).files,
      emitC({ manifest: q, manifestName: 'm', manifestSha256: '0', policy: { kind: 'patience', thresholds: [], patience: 2 }, policyFrom: 't' }).files,
    ];
  };
  /** C text without comments and string literals (a tensor may be named "double"): what the compiler reads. */
  const code = (t: string) => t.replace(/\/\*[\s\S]*?\*\//g, ' ').replace(/\/\/[^\n]*/g, ' ').replace(/"(?:[^"\\\n]|\\.)*"/g, '""');

  it('the C holds no double and no libm: no <math.h>, no double, no libm call', () => {
    for (const files of cSets()) for (const f of files) {
      const c = code(f.text);
      expect(c, f.name).not.toMatch(/\bdouble\b/);
      expect(c, f.name).not.toMatch(/#\s*include\s*<(?:math|tgmath|complex)\.h>/);
      // no C99 <math.h> function (7.12) called by name: ours are offramp_exp, offramp_log, offramp_sqrt
      expect(c, f.name).not.toMatch(/(?<![\w])(?:exp|expf|exp2f?|expm1f?|log|logf|log2f?|log1pf?|sqrt|sqrtf|pow|powf|fabsf?|floorf?|ceilf?|roundf?|lrintf?)\s*\(/);
      // every floating constant says it is a float (an unsuffixed one is a double)
      expect(c.match(/(?<![\w.])(?:\d+\.\d*|\.\d+|0x[0-9a-f]*\.?[0-9a-f]*p[-+]?\d+|\d+e[-+]?\d+)(?![\w.])/gi) ?? [], f.name).toEqual([]);
    }
  });

  it.runIf(GCC)('compiles with the host gcc as C99, -Wall -Wextra -Werror, and links without libm', async () => {
    for (const [i, files] of cSets().entries()) {
      const d = path.join(tmp, `host-${i}`);
      fs.mkdirSync(d);
      for (const f of files) fs.writeFileSync(path.join(d, f.name), f.text);
      fs.writeFileSync(path.join(d, 'main.c'), '#include "offramp_policy.h"\nint main(void) { return offramp_stages[0].exits != 1; }\n');
      for (const src of ['main.c', 'offramp_policy.c', 'offramp_decide.c']) await run('gcc', [...CFLAGS, '-c', src], d);
      await run('gcc', ['main.o', 'offramp_policy.o', 'offramp_decide.o', '-o', 'main'], d);
      expect(spawnSync(path.join(d, 'main')).status).toBe(0);
      // what the library needs from outside: nothing of libm (binutils' nm lists the undefined symbols)
      const undef = spawnSync('nm', ['-u', 'offramp_decide.o'], { cwd: d, encoding: 'utf8' });
      if (undef.status === 0) expect(undef.stdout).not.toMatch(/\b(?:exp|log|sqrt)f?\b/);
      else if (process.env.CI) throw new Error('nm is missing');
    }
  }, 60_000);

  // Arm's procedure call standard (AAPCS) names the run-time helpers of software floating point __aeabi_d*
  // (double) and __aeabi_f* (float): with a single-precision FPU neither may be called.
  it.runIf(ARM_GCC)('compiles with arm-none-eabi-gcc for a Cortex-M4F (hard float, fpv4-sp-d16) and calls no software float', async () => {
    for (const [i, files] of cSets().entries()) {
      const d = path.join(tmp, `m4f-${i}`);
      fs.mkdirSync(d);
      for (const f of files) fs.writeFileSync(path.join(d, f.name), f.text);
      for (const src of ['offramp_policy.c', 'offramp_decide.c'])
        await run('arm-none-eabi-gcc', ['-mcpu=cortex-m4', '-mthumb', '-mfloat-abi=hard', '-mfpu=fpv4-sp-d16', '-O2', '-Wall', '-Wextra', '-Werror', '-std=c99', '-pedantic', '-Wdouble-promotion', '-c', src], d);
      const undef = spawnSync('arm-none-eabi-nm', ['-u', 'offramp_decide.o'], { cwd: d, encoding: 'utf8' });
      expect(undef.status).toBe(0);
      expect(undef.stdout).not.toMatch(/__aeabi_[df]|\b(?:exp|log|sqrt)f?\b/);
    }
  }, 60_000);

  it('manifests emit-c cannot serve are refused with the file named', () => {
    const m = manifest();
    m.stages[0].exits = [];
    m.stages[0].outputs = m.stages[0].outputs.filter((o) => o.name !== 'exit-0');
    m.outputs = m.outputs.filter((o) => o.name !== 'exit-0');
    expect(() => chainTable(m, 'x/manifest.json')).toThrow(/numbered exit-0/);
    const w = manifest();
    w.outputs[1] = { ...w.outputs[1], shape: [1, 7], bytes: 28 };
    expect(() => chainTable(w, 'x/manifest.json')).toThrow(/same classes/);
    expect(() => emitC({ manifest: manifest(), manifestName: 'm', manifestSha256: '0', policy: { kind: 'margin', thresholds: [0.1] } as Policy, policyFrom: 't' }, 'x/manifest.json'))
      .toThrow(/margin needs 3 thresholds/);
  });
});

describe('offramp emit-c', () => {
  const split = path.join(tmp, 'cli-split');
  const mfile = path.join(split, 'manifest.json');
  const policy: Policy = { kind: 'entropy', thresholds: [0.2, 0.3, null] };
  const runCli = async (args: string[]) => {
    const err: string[] = [];
    const w = process.stderr.write.bind(process.stderr), o = process.stdout.write.bind(process.stdout);
    process.stderr.write = ((s: string) => { err.push(String(s)); return true; }) as typeof process.stderr.write;
    process.stdout.write = (() => true) as typeof process.stdout.write;
    try { return { code: await main(args), err: err.join('') }; } finally { process.stderr.write = w; process.stdout.write = o; }
  };

  /** The manifest in `dir`, with stage files whose SHA-256 it records. */
  const withStages = (dir: string, m: ReturnType<typeof manifest>) => {
    fs.mkdirSync(dir, { recursive: true });
    for (const st of m.stages) {
      const bytes = Buffer.from(`stage ${st.index} of ${dir}`);
      fs.writeFileSync(path.join(dir, st.file), bytes);
      st.sha256 = crypto.createHash('sha256').update(bytes).digest('hex');
    }
    fs.writeFileSync(path.join(dir, 'manifest.json'), JSON.stringify(m, null, 2));
  };

  it('reads the manifest\'s policy, writes both files, byte-identical on a second run', async () => {
    withStages(split, manifest(policy));
    const out = path.join(tmp, 'cli-out');
    expect((await runCli(['emit-c', split, '-o', out])).code).toBe(0);
    const first = ['offramp_policy.h', 'offramp_policy.c'].map((f) => fs.readFileSync(path.join(out, f)));
    expect(first[1].toString()).toContain('../cli-split/manifest.json (sha256 ');
    expect(first[1].toString()).toContain('policy (the manifest): {"kind":"entropy","thresholds":[0.2,0.3,null]}');
    expect((await runCli(['emit-c', mfile, '-o', out])).code).toBe(0);
    expect(['offramp_policy.h', 'offramp_policy.c'].map((f) => fs.readFileSync(path.join(out, f)))).toEqual(first);
    expect(fs.readdirSync(out).sort()).toEqual([...C_FILES].sort());
  });

  it('--policy overrides (inline JSON or a file); without any policy it is a usage error', async () => {
    const bare = path.join(tmp, 'cli-bare');
    withStages(bare, manifest());
    const out = path.join(tmp, 'cli-out2');
    const none = await runCli(['emit-c', bare, '-o', out]);
    expect(none.code).toBe(2);
    expect(none.err).toMatch(/manifest\.json: the manifest holds no policy yet/);
    expect((await runCli(['emit-c', bare, '-o', out, '--policy', '{"kind":"patience","thresholds":[],"patience":2}'])).code).toBe(0);
    expect(fs.readFileSync(path.join(out, 'offramp_policy.c'), 'utf8')).toContain('OFFRAMP_PATIENCE, OFFRAMP_NO_SCORE, 2, 3,');
    const pf = path.join(tmp, 'policy.json');
    fs.writeFileSync(pf, JSON.stringify({ kind: 'difference', thresholds: [0.1], distance: 'js', exit: 1 }));
    expect((await runCli(['emit-c', bare, '-o', out, '--policy', pf])).code).toBe(0);
    expect(fs.readFileSync(path.join(out, 'offramp_policy.h'), 'utf8')).toContain('#define OFFRAMP_POLICY_STREAM 1');
    fs.writeFileSync(pf, JSON.stringify({ kind: 'difference', thresholds: [0.1], distance: 'hamming', exit: 1 }));
    const bad = await runCli(['emit-c', bare, '-o', out, '--policy', pf]);
    expect(bad.code).toBe(1);
    expect(bad.err).toContain(`${pf}: policy: distance must be one of`);
    const missing = await runCli(['emit-c', path.join(tmp, 'nowhere'), '-o', out]);
    expect(missing.code).toBe(1);
    expect(missing.err).toMatch(/no manifest here/);
  });

  it('checks the stage files against the manifest, as check and replay do; a failed run leaves OUTDIR as it was', async () => {
    const dir = path.join(tmp, 'cli-tamper');
    const m = manifest(policy);
    withStages(dir, m);
    const out = path.join(tmp, 'cli-out3', 'firmware');
    fs.appendFileSync(path.join(dir, m.stages[1].file), 'x');
    const changed = await runCli(['emit-c', dir, '-o', out]);
    expect(changed.code).toBe(1);
    expect(changed.err).toBe(`offramp: ${path.join(dir, m.stages[1].file)}: stage file changed since the split (SHA-256 differs from the manifest)\n`);
    fs.rmSync(path.join(dir, m.stages[1].file));
    const missing = await runCli(['emit-c', dir, '-o', out]);
    expect(missing.code).toBe(1);
    expect(missing.err).toContain('stage file is missing');
    // Neither OUTDIR nor the folder above it was made.
    expect(fs.existsSync(path.join(tmp, 'cli-out3'))).toBe(false);
    // A policy the emitter refuses: no empty OUTDIR either.
    withStages(dir, m);
    const bad = await runCli(['emit-c', dir, '-o', out, '--policy', '{"kind":"margin","thresholds":[0.1]}']);
    expect(bad.code).toBe(1);
    expect(fs.existsSync(path.join(tmp, 'cli-out3'))).toBe(false);
    expect((await runCli(['emit-c', dir, '-o', out])).code).toBe(0);
    expect(fs.readdirSync(out).sort()).toEqual([...C_FILES].sort());
  });
});

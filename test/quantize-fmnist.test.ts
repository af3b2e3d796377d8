// offramp quantize on the Fashion-MNIST CNN fixture (scripts/train-fmnist.py) with Debian's
// dataset-fashion-mnist: exit heads grafted on training rows, split, quantized to int8 QDQ stage files
// calibrated on other training rows, then the int8 chain against the float chain on test rows.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { writeNpy } from '../lib/data/npy.js';
import { loadChain, type Chain } from '../lib/run/chain.js';
import { loadModel } from '../lib/graph/io.js';
import { costModel } from '../lib/cost/report.js';
import { stageFootprints } from '../lib/chip/budget.js';
import { tensorFromData } from '../lib/runtime/ort.js';
import type { Manifest } from '../lib/split/manifest.js';
import { execFileSync, spawnSync } from 'node:child_process';
import { captureCache, chainLayout } from '../lib/tune/chain-capture.js';
import { viewOf } from '../lib/tune/cache.js';
import { chainFor, runFrame, type FramePolicy } from '../lib/policy/policy.js';
import { offramp } from './helpers/cli.js';
import { folderProblems } from './helpers/folder-check.js';
import { loadFmnist, requireFmnist } from './helpers/fmnist.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import { measureDevice } from '../lib/measure/device.js';
import { compileFirmware, firmwareAnswers, loadProgram, againstOrt, histogram, expectReferenceEqual } from './helpers/firmware.js';

const MODEL = 'test/fixtures/fmnist/cnn.onnx';
const GCC = spawnSync('gcc', ['--version']).status === 0;
if (!toolchainStatus().ready && process.env.CI) throw new Error(`the emulated Cortex-M checks need the toolchain under CI: ${toolchainStatus().message}`);
const have = requireFmnist();
const per = 28 * 28;
const CUTS = ['/b1/b1.2/MaxPool_output_0', '/b2/b2.2/MaxPool_output_0'];

/** Top-1 of the final output for the first `n` rows, through a chain. */
async function predict(chain: Chain, x: Float32Array, n: number, out: string): Promise<Int32Array> {
  const pred = new Int32Array(n);
  for (let i = 0; i < n; i++) {
    const r = await chain.run({ input: tensorFromData(1, [1, 1, 28, 28], x.subarray(i * per, (i + 1) * per)) });
    const z = r.outputs[out].data as Float32Array;
    let best = 0;
    for (let k = 1; k < z.length; k++) if (z[k] > z[best]) best = k;
    pred[i] = best;
  }
  return pred;
}

describe.skipIf(!have)('quantize the Fashion-MNIST CNN', () => {
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-quant-'));
  const f = (n: string) => path.join(tmp, n);
  const N_TEST = 2000;
  let test: { images: Float32Array; labels: Int32Array };
  afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
  beforeAll(() => {
    const train = loadFmnist('train', 2500);
    test = loadFmnist('test', N_TEST);
    writeNpy(f('fit.npy'), train.images.slice(0, 2000 * per), [2000, 1, 28, 28]);
    writeNpy(f('fit_y.npy'), Int32Array.from(train.labels.subarray(0, 2000)), [2000]);
    // Calibration rows apart from the fitting rows and from the test rows (common practice: a few hundred).
    writeNpy(f('calib.npy'), train.images.slice(2000 * per, 2500 * per), [500, 1, 28, 28]);
    writeNpy(f('test.npy'), test.images, [N_TEST, 1, 28, 28]);
    writeNpy(f('test_y.npy'), Int32Array.from(test.labels), [N_TEST]);
    // fewer rows where a command only has to work on the int8 folder, not measure it
    writeNpy(f('small.npy'), test.images.slice(0, 600 * per), [600, 1, 28, 28]);
    writeNpy(f('small_y.npy'), Int32Array.from(test.labels.subarray(0, 600)), [600]);
    for (const args of [
      ['graft', MODEL, '--cuts', CUTS.join(','), '--data', f('fit.npy'), '--labels', f('fit_y.npy'), '-o', f('grafted.onnx')],
      ['split', f('grafted.onnx'), '-o', f('split')],
      ['quantize', f('split'), '--data', f('calib.npy'), '-o', f('q')],
    ]) {
      const r = offramp(args);
      if (r.code !== 0) throw new Error(`${args[0]}: ${r.stderr}`);
    }
  });

  it('int8 top-1 accuracy within 1 point of float, agreement ≥ 97 %', async () => {
    // Krishnamoorthi 2018 ("Quantizing deep convolutional networks for efficient inference: A whitepaper"),
    // table of post-training results with per-channel int8 weights and per-tensor int8 activations: CNN top-1
    // within about a point of float (from memory: fractions of a point to ~1 point). Same order of magnitude here.
    const float = await loadChain(f('split')), q = await loadChain(f('q'));
    try {
      const a = await predict(float, test.images, N_TEST, 'logits'), b = await predict(q, test.images, N_TEST, 'logits');
      let fc = 0, qc = 0, same = 0;
      for (let i = 0; i < N_TEST; i++) { fc += +(a[i] === test.labels[i]); qc += +(b[i] === test.labels[i]); same += +(a[i] === b[i]); }
      console.log(`Fashion-MNIST int8 (${q.manifest.quantization!.calibration.method}, ${q.manifest.quantization!.calibration.samples} rows): top-1 ${(qc / N_TEST * 100).toFixed(2)} % vs float ${(fc / N_TEST * 100).toFixed(2)} % on ${N_TEST} test rows; agreement ${(same / N_TEST * 100).toFixed(2)} %`);
      expect(Math.abs(fc - qc) / N_TEST * 100).toBeLessThanOrEqual(1);
      expect(same / N_TEST).toBeGreaterThanOrEqual(0.97);
    } finally { await float.release(); await q.release(); }
  });

  it('the manifest: source split and calibration recorded, int8 handover with parameters, exits with theirs', () => {
    const m = JSON.parse(fs.readFileSync(f('q/manifest.json'), 'utf8')) as Manifest;
    const src = JSON.parse(fs.readFileSync(f('split/manifest.json'), 'utf8')) as Manifest;
    expect(m.quantization!.from.file).toBe('../split/manifest.json');
    expect(m.quantization!.from.sha256).toMatch(/^[0-9a-f]{64}$/);
    expect(m.quantization!.calibration).toMatchObject({ method: 'minmax', samples: 500, data: { file: '../calib.npy' } });
    expect(m.source.sha256).toBe(src.source.sha256);
    expect(m.policy).toBeUndefined();
    for (const k of [0, 1]) {
      const h = m.stages[k].outputs.find((t) => t.name === CUTS[k])!;
      expect(h.dtype).toBe('int8');
      expect(h.bytes).toBe(src.stages[k].outputs.find((t) => t.name === CUTS[k])!.bytes / 4);
      expect(m.stages[k + 1].inputs.find((t) => t.name === CUTS[k])).toMatchObject({ dtype: 'int8', quant: h.quant });
      expect(m.stages[k].handoverBytes).toBe(src.stages[k].handoverBytes / 4);
    }
    for (const o of m.outputs) {
      expect(o.quant!.scale).toBeGreaterThan(0);
      expect(o.quant!.zeroPoint).toBeGreaterThanOrEqual(-128);
      expect(o.quant!.zeroPoint).toBeLessThanOrEqual(127);
    }
    // every stage file is a QDQ model that the codec's structure check and onnxruntime (loadChain above) accept
    for (const s of m.stages) {
      const sm = loadModel(f(`q/${s.file}`));
      expect(sm.graph.nodes.some((n) => n.op === 'DequantizeLinear')).toBe(true);
      expect([...sm.graph.initializers.values()].some((t) => t.dataType === 3)).toBe(true);
    }
  });

  it('same inputs, same bytes: a second quantize writes identical files', () => {
    const r = offramp(['quantize', f('split'), '--data', f('calib.npy'), '-o', f('q2')]);
    expect(r.code, r.stderr).toBe(0);
    for (const n of fs.readdirSync(f('q'))) {
      const a = fs.readFileSync(path.join(f('q'), n)), b = fs.readFileSync(path.join(f('q2'), n));
      // the manifest names the float split and the data relative to itself: same depth, same text
      expect(a.equals(b), n).toBe(true);
    }
  });

  it('stage weight bytes within 10 % of the int8 projection of the float stage files (lib/chip/budget.ts)', () => {
    const m = JSON.parse(fs.readFileSync(f('q/manifest.json'), 'utf8')) as Manifest;
    const fl = JSON.parse(fs.readFileSync(f('split/manifest.json'), 'utf8')) as Manifest;
    const rows = m.stages.map((s) => {
      const fm = loadModel(f(`split/${fl.stages[s.index].file}`));
      return [s.weightBytes, Number(stageFootprints(fm, costModel(fm, { batch: 1 }))[0].int8.weightBytes)];
    });
    console.log(`int8 stage weights as stored vs projected: ${rows.map(([a, b]) => `${a} B / ${b} B`).join(', ')}`);
    for (const [stored, projected] of rows) expect(Math.abs(stored - projected) / projected).toBeLessThanOrEqual(0.1);
  });

  it('check reports agreement instead of float tolerance; cost, tune, replay and emit-c work on the int8 folder unchanged', () => {
    const c = offramp(['check', f('q'), '--against', f('grafted.onnx'), '--data', f('test.npy'), '--samples', '300', '--min-agreement', '0.9', '--json']);
    expect(c.code, c.stderr).toBe(0);
    const r = JSON.parse(c.stdout);
    expect(r.quantized).toBe(true);
    const logits = r.outputs.find((o: { name: string }) => o.name === 'logits');
    expect(logits.samples).toBe(300);
    expect(logits.agreement).toBeGreaterThanOrEqual(0.97);
    expect(logits.maxAbs).toBeGreaterThan(0);
    const t = offramp(['tune', f('q'), '--data', f('small.npy'), '--labels', f('small_y.npy'), '--json']);
    expect(t.code, t.stderr).toBe(0);
    // cost reads the QDQ file as an integer interpreter runs it: every MAC (convs, the head's Gemm) is int8, and
    // activations at 1 byte instead of 4 put the peak near a quarter of the float stage's (a fused Relu saves more)
    const stage1 = (dir: string) => f(`${dir}/${(JSON.parse(fs.readFileSync(f(`${dir}/manifest.json`), 'utf8')) as Manifest).stages[1].file}`);
    const qc = JSON.parse(offramp(['cost', stage1('q'), '--json']).stdout).model;
    const fc = JSON.parse(offramp(['cost', stage1('split'), '--json']).stdout).model;
    expect(qc.int8Macs).toBe(qc.macs);
    expect(qc.macs).toBe(fc.macs);
    expect(fc.int8Macs).toBe(0);
    expect(qc.peakActivationBytes).toBeLessThanOrEqual(fc.peakActivationBytes / 4);
    const rp = offramp(['replay', f('q'), '--data', f('small.npy'), '--labels', f('small_y.npy'), '--json']);
    expect(rp.code, rp.stderr).toBe(0);
    expect(JSON.parse(rp.stdout).summary.frames).toBe(600);
    const e = offramp(['emit-c', f('q'), '-o', f('fw')]);
    expect(e.code, e.stderr).toBe(0);
    // the exits' int8 parameters reach the firmware for the _q8 decision functions, exactly (float32 scales)
    const m = JSON.parse(fs.readFileSync(f('q/manifest.json'), 'utf8')) as Manifest;
    const c99 = fs.readFileSync(f('fw/offramp_policy.c'), 'utf8');
    const row = /offramp_exit_q8\[OFFRAMP_EXITS \+ 1\] = \{ (.*) \};/.exec(c99)![1];
    const got = [...row.matchAll(/\{ (\S+)f \/\* [^*]+ \*\/, (-?\d+) \}/g)].map((x) => ({ scale: Number(x[1].replace(/^(-?)0x1\.?([0-9a-f]*)p(-?\d+)$/, (_, s, h, e) => String((s ? -1 : 1) * (1 + (h ? parseInt(h, 16) / 16 ** h.length : 0)) * 2 ** Number(e)))), zeroPoint: Number(x[2]) }));
    expect(got).toEqual(['exit-0', 'exit-1', 'logits'].map((n) => m.outputs.find((o) => o.name === n)!.quant));
  });

  it.skipIf(!GCC)('emit-c writes the whole int8 network: gcc build equal to the integer reference bit for bit, onnxruntime agreeing on label and exit', async () => {
    // the folder was tuned above (600 test rows); emit-c wrote the whole library into fw
    expect(fs.existsSync(f('fw/offramp_model.h'))).toBe(true);
    compileFirmware(f('fw'), f('fw.exe'));
    const { values } = expectReferenceEqual(f('fw.exe'), f('q'), test.images.subarray(0, 50 * per), test.images.subarray(0, 200 * per));
    const { program, manifest, reach, outputs } = loadProgram(f('q'));
    const all = firmwareAnswers(f('fw.exe'), test.images);
    const o = await againstOrt(f('q'), program, outputs, manifest.policy!.rule, reach, test.images, all);
    const agree = 1 - o.differ.length / o.frames;
    const right = all.label.filter((l, i) => l === test.labels[i]).length / o.frames;
    console.log(`Fashion-MNIST int8 firmware (gcc): ${values} int8 values of 50 test images bit for bit equal to the reference, 200 answers equal; vs onnxruntime on ${o.frames} test images: int8 logits ${histogram(o.steps)}; label and exit equal on ${(agree * 100).toFixed(2)} %; firmware top-1 ${(right * 100).toFixed(2)} %`
      + (o.differ.length ? `; differ at ${o.differ.slice(0, 5).map((d) => `#${d.frame} (label, exit) ${d.firmware} vs ${d.ort}`).join(', ')} (a logit a step apart near a threshold: the fixed-point requantization against onnxruntime's float one)` : ''));
    expect(agree).toBeGreaterThanOrEqual(0.995);
  }, 600_000);

  it.skipIf(!toolchainStatus().ready)('on the emulated m4f, m7 and m55 the firmware answers as the TypeScript reference does', { timeout: 600_000 }, async () => {
    for (const core of ['m4f', 'm7', 'm55']) {
      const r = await measureDevice({ dir: f('q'), data: f('test.npy'), labels: f('test_y.npy'), core, rows: 24 });
      expect(r.answers.equalToReference, core).toBe(24);
      console.log(`Fashion-MNIST int8 firmware on ${core}: ${(r.perFrame.full / r.stages.reduce((a, s) => a + s.macs, 0)).toFixed(2)} instructions per MAC for the whole network, ${r.perFrame.policy} per frame with the policy (${(r.perFrame.savedShare * 100).toFixed(1)} % saved); ${r.answers.equalToOnnxruntime}/24 equal to onnxruntime`);
    }
  });

  it('build --int8: the policy tuned on the int8 chain, its firmware, the int8 files judged as stored', () => {
    const out = f('build8');
    const r = offramp(['build', MODEL, '--data', f('fit.npy'), '--labels', f('fit_y.npy'), '--candidates', '3', '--max-exits', '2', '--target', 'm4f', '--int8', '-o', out, '--json']);
    expect(r.code, r.stderr).toBe(0);
    const b = JSON.parse(r.stdout);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'int8/manifest.json'), 'utf8')) as Manifest;
    expect(m.quantization!.calibration).toMatchObject({ method: 'minmax', samples: 1000, rows: 'even' });
    expect(m.policy!.rule).toEqual(b.int8.policy);
    expect(b.int8.heldOut.dropPoints).toBeLessThanOrEqual(1 + 1e-9);   // points as a float difference of shares
    // the int8 policy is certified on the float build's terms, and the promise is recorded with it
    expect(m.policy!.guarantee).toMatchObject({ confidence: 0.95, maxDrop: 1, unit: 'samples' });
    expect(b.int8.guarantee).toEqual(m.policy!.guarantee);
    expect(folderProblems(out)).toEqual([]);
    console.log(`Fashion-MNIST build: per-frame saving ${(b.heldOut.saving * 100).toFixed(1)} % float32, ${(b.int8.heldOut.saving * 100).toFixed(1)} % int8 (policy tuned on each chain; held out ${b.int8.heldOut.samples} rows; int8 ${b.int8.guarantee.certified ? `certified bound ${b.int8.guarantee.bound.toFixed(2)} pp` : 'not certified'}); int8 agreement ${b.int8.agreement.map((a: { output: string; agreement: number }) => `${a.output} ${(a.agreement * 100).toFixed(2)} %`).join(', ')}`);
    // the budget judges the stored int8 files, not a projection of the float ones
    expect(b.budget.stages.map((s: { stored: { weightBytes: number } }) => s.stored.weightBytes)).toEqual(m.stages.map((s) => s.weightBytes));
    const c99 = fs.readFileSync(path.join(out, 'firmware/offramp_policy.c'), 'utf8');
    expect(c99).toMatch(/manifest: \.\.\/int8\/manifest\.json/);
    expect(c99).toMatch(/offramp_exit_q8\[OFFRAMP_EXITS \+ 1\] = /);
    expect(fs.readdirSync(tmp).filter((n) => n.includes('.partial-'))).toEqual([]);
    expect(fs.readdirSync(out).filter((n) => n.endsWith('.npy'))).toEqual([]);
  });

  it.skipIf(!GCC)('the int8 firmware (gcc) decides as lib/policy does on the int8 chain\'s own exit outputs', async () => {
    // Needs the build --int8 folder of the test before. The chain's float outputs are DequantizeLinear results,
    // so the int8 values firmware holds are recovered exactly: (q - zp) * scale in float32 gives them back.
    const dir = f('build8');
    const chain = await loadChain(path.join(dir, 'int8'));
    const m = chain.manifest;
    const { cache, layout } = await (async () => { try { return await captureCache(chain, f('small.npy')); } finally { await chain.release(); } })();
    const E = layout.exits.length, C = layout.classes, n = cache.samples;
    const qp = [...layout.exits, layout.final].map((name) => m.outputs.find((o) => o.name === name)!.quant!);
    const q = new Int8Array(n * (E + 1) * C);
    for (let i = 0; i < n; i++) for (let k = 0; k <= E; k++) for (let j = 0; j < C; j++) {
      const at = (i * (E + 1) + k) * C + j, z = cache.logits[at];
      const v = Math.round(z / qp[k].scale) + qp[k].zeroPoint;
      expect(Math.fround((v - qp[k].zeroPoint) * qp[k].scale)).toBe(z);
      q[at] = v;
    }
    const policy = m.policy!.rule as FramePolicy;
    const c = chainFor(policy, chainLayout(m).costs.stage.reduce<number[]>((a, x) => [...a, (a.at(-1) ?? 0) + x], []), E, C);
    const want = new Int32Array(2 * n);
    for (let i = 0; i < n; i++) { const r = runFrame(policy, c, viewOf(cache, i)); want[2 * i] = r.exit; want[2 * i + 1] = r.label; }
    fs.writeFileSync(path.join(dir, 'firmware/main.c'), `#include <stdio.h>
#include "offramp_policy.h"
int main(int argc, char **argv) {
  static int8_t buf[${n * (E + 1) * C}];
  FILE *in = fopen(argv[1], "rb"), *out = fopen(argv[2], "wb");
  int32_t i, k;
  if (argc != 3 || !in || !out || fread(buf, 1, sizeof buf, in) != sizeof buf) return 3;
  for (i = 0; i < ${n}; i++) {
    const int8_t *q[OFFRAMP_EXITS + 1];
    offramp_result_t r;
    for (k = 0; k <= OFFRAMP_EXITS; k++) q[k] = buf + ((size_t)i * (OFFRAMP_EXITS + 1) + k) * OFFRAMP_CLASSES;
    r = offramp_run_frame_q8(&offramp_policy, q, offramp_exit_q8, 0);
    fwrite(&r.exit, 4, 1, out); fwrite(&r.label, 4, 1, out);
  }
  return fclose(out) ? 4 : 0;
}
`);
    fs.writeFileSync(path.join(dir, 'q.bin'), q);
    execFileSync('gcc', ['-std=c99', '-O2', '-ffp-contract=off', '-o', 'decide', 'main.c', 'offramp_policy.c', 'offramp_decide.c'], { cwd: path.join(dir, 'firmware') });
    execFileSync(path.join(dir, 'firmware/decide'), [path.join(dir, 'q.bin'), path.join(dir, 'd.bin')]);
    const got = new Int32Array(fs.readFileSync(path.join(dir, 'd.bin')).buffer.slice(0));
    expect(Array.from(got)).toEqual(Array.from(want));
    const early = Array.from({ length: n }, (_, i) => want[2 * i]).filter((e) => e < E).length;
    console.log(`int8 firmware decisions = lib/policy on ${n} cached int8 chain outputs (${early} leave early)`);
    expect(early).toBeGreaterThan(0);
  });

  it('bad input: one line naming the file, exit 1, the output folder untouched', () => {
    const out = f('out');
    fs.mkdirSync(out);
    fs.writeFileSync(path.join(out, 'keep.txt'), 'mine');
    const snapshot = () => fs.readdirSync(out).sort().join(',') + fs.readFileSync(path.join(out, 'keep.txt'), 'utf8');
    const before = snapshot();
    writeNpy(f('wrong.npy'), new Float32Array(4 * 27 * 27), [4, 1, 27, 27]);
    writeNpy(f('empty.npy'), new Float32Array(0), [0, 1, 28, 28]);
    const nan = new Float32Array(3 * per); nan[per + 5] = NaN;
    writeNpy(f('nan.npy'), nan, [3, 1, 28, 28]);
    const cases: [string[], RegExp][] = [
      [[f('split'), '--data', f('wrong.npy')], /wrong\.npy: data shape \[4, 1, 27, 27\] does not match/],
      [[f('split'), '--data', f('empty.npy')], /empty\.npy: .*no rows/],
      [[f('split'), '--data', f('nan.npy')], /nan\.npy: row 1\b.*(non-finite|must be finite)/],
      [[f('q'), '--data', f('calib.npy')], /q\/manifest\.json: already quantized/],
    ];
    for (const [args, msg] of cases) {
      const r = offramp(['quantize', ...args, '-o', out]);
      expect(r.code, r.stderr).toBe(1);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(msg);
      expect(snapshot()).toBe(before);
    }
    expect(fs.readdirSync(tmp).filter((n) => n.includes('.partial-'))).toEqual([]);
  });
});

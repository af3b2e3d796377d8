// The int8 firmware's operators beyond the conv stack (Add, Mul, Concat, Split, Slice, Transpose, the activation
// tables), end to end on a small CNN built in code (test/helpers/nets.ts: opsNet) and invented data
// (four classes: a square in one quadrant of a noisy 3×12×12 frame, its colour by class): grafted, split,
// quantized and tuned with the CLI, emit-c, compiled with gcc. Every int8 tensor equals the
// TypeScript integer reference bit for bit; against onnxruntime running the same QDQ stage files (an
// outside implementation of the ONNX operator definitions) every int8 tensor is within a step. An
// operator without a kernel (Softmax) is refused by op type, node and stage file, nothing written.
import { describe, it, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { opsNet } from './helpers/nets.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import { mulberry32 } from '../lib/graph/build.js';
import type { Model } from '../lib/graph/ir.js';
import { floatTensor, floatValues } from '../lib/quant/fold-bn.js';
import { INT8, FLOAT } from '../lib/onnx/dtype.js';
import { modelBytes, openSession, runSession, tensorFromData } from '../lib/runtime/ort.js';
import { Int8Machine } from '../lib/firmware/interp.js';
import { stepInputs, type Program } from '../lib/firmware/program.js';
import { GCC, compileFirmware, firmwareAnswers, loadProgram, againstOrt, histogram, expectReferenceEqual } from './helpers/firmware.js';

if (!GCC && process.env.CI) throw new Error('gcc is missing: the firmware tests need it under CI');
const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-fw-ops-'));
const f = (n: string) => path.join(tmp, n);
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
const PER = 3 * 12 * 12;

/** Invented frames: noise, and a square in quadrant k (the class) whose brightness by channel also depends on k (a global pooling sees it). */
function frames(n: number, seed: number): Float32Array {
  const rnd = mulberry32(seed);
  const gauss = () => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const x = new Float32Array(n * PER);
  for (let i = 0; i < n; i++) {
    const k = i % 4, cy = (k >> 1) * 6 + 3, cx = (k & 1) * 6 + 3;
    for (let c = 0; c < 3; c++) for (let y = 0; y < 12; y++) for (let v = 0; v < 12; v++)
      x[i * PER + c * 144 + y * 12 + v] = 0.5 * gauss() + (Math.abs(y - cy) < 3 && Math.abs(v - cx) < 3 ? 0.6 * ((k + c) % 4) : 0);
  }
  return x;
}

/** The net with fc.bias moved so that each class's mean logit over `x` is 0: a random net otherwise answers one class everywhere. */
async function centred(x: Float32Array): Promise<Model> {
  const model = opsNet(), n = x.length / PER;
  const s = await openSession(modelBytes(model));
  const z = (await runSession(s, { input: tensorFromData(FLOAT, [n, 3, 12, 12], x) })).logits.data as Float32Array;
  await s.release();
  const bias = floatValues(model.graph.initializers.get('fc.bias')!)!;
  const mean = Float32Array.from(bias, (b, c) => { let t = 0; for (let i = 0; i < n; i++) t += z[i * 4 + c]; return b - t / n; });
  const inits = new Map(model.graph.initializers).set('fc.bias', floatTensor('fc.bias', [4], mean));
  return { ...model, graph: { ...model.graph, initializers: inits } };
}

let val: Float32Array;
beforeAll(async () => {
  const fit = frames(800, 1);
  saveModel(await centred(fit), f('net.onnx'));
  writeNpy(f('fit.npy'), fit, [800, 3, 12, 12]);
  writeNpy(f('cal.npy'), frames(300, 2), [300, 3, 12, 12]);
  writeNpy(f('tune.npy'), frames(600, 3), [600, 3, 12, 12]);
  val = frames(1000, 4);
  for (const args of [
    // heads distil the final output (no labels): the exits answer as the model does
    ['graft', f('net.onnx'), '--cuts', 'pool,shuffled', '--data', f('fit.npy'), '-o', f('grafted.onnx')],
    ['split', f('grafted.onnx'), '-o', f('split')],
    ['quantize', f('split'), '--data', f('cal.npy'), '-o', f('q')],
    ['tune', f('q'), '--data', f('tune.npy')],
    ['emit-c', f('q'), '-o', f('fw')],
  ]) {
    const r = offramp(args);
    if (r.code !== 0) throw new Error(`${args[0]}: ${r.stderr}`);
  }
});

interface Diffs { steps: Map<number, number>; after: Map<number, number> }
const bump = (m: Map<number, number>, d: number) => m.set(d, (m.get(d) ?? 0) + 1);

/**
 * onnxruntime on each QDQ stage file with every int8 value of a step as an extra output; a stage is fed
 * the reference's handovers. By kernel kind: |difference| of each output value where every input of the
 * step was equal in both (`steps`: the kernel on its own), and where an input already differed (`after`).
 */
async function ortTensors(dir: string, program: Program, x: Float32Array): Promise<Map<string, Diffs>> {
  const { manifest } = loadProgram(dir);
  const byKind = new Map<string, Diffs>();
  const m = new Int8Machine(program), per = program.input.tensor.size;
  const sessions = await Promise.all(program.stages.map(async (st) => {
    const model = loadModel(path.join(dir, st.file));
    const have = new Set([...model.graph.outputs, ...model.graph.inputs].map((o) => o.name));
    const values = new Map(st.steps.flatMap((s) => [s.y, ...stepInputs(s)]).filter((t) => !have.has(t.name)).map((t) => [t.name, t]));
    const extra = [...values.values()].map((t) => ({ name: t.name, type: { dtype: INT8, shape: t.shape }, proto: { name: t.name } }));
    return { model, session: await openSession(modelBytes({ ...model, graph: { ...model.graph, outputs: [...model.graph.outputs, ...extra] } })) };
  }));
  for (let i = 0; i * per < x.length; i++) {
    const frame = x.subarray(i * per, (i + 1) * per);
    m.load(frame);
    for (let k = 0; k < program.stages.length; k++) {
      const { model, session } = sessions[k];
      const feeds: Record<string, ReturnType<typeof tensorFromData>> = {};
      const mine = new Map<string, Int8Array>();
      for (const v of model.graph.inputs) {
        if (model.graph.initializers.has(v.name)) continue;
        if (v.type?.dtype === FLOAT) feeds[v.name] = tensorFromData(FLOAT, manifest.inputs[0].shape.map(Number), frame);
        else { const h = program.handovers.find((t) => t.name === v.name)!; mine.set(h.name, Int8Array.from(m.view(h))); feeds[v.name] = tensorFromData(INT8, h.shape, m.view(h)); }
      }
      if (k === 0) mine.set(program.input.tensor.name, Int8Array.from(m.view(program.input.tensor)));
      m.runStage(k, mine);
      const out = await runSession(session, feeds);
      const ort = (name: string) => (feeds[name] ?? out[name]).data as Int8Array;
      for (const s of program.stages[k].steps) {
        const clean = stepInputs(s).every((t) => { const a = ort(t.name), b = mine.get(t.name)!; return a.every((v, j) => v === b[j]); });
        let e = byKind.get(s.kind);
        if (!e) byKind.set(s.kind, (e = { steps: new Map(), after: new Map() }));
        const got = ort(s.y.name), want = mine.get(s.y.name)!;
        for (let j = 0; j < want.length; j++) bump(clean ? e.steps : e.after, Math.abs(got[j] - want[j]));
      }
    }
  }
  await Promise.all(sessions.map((s) => s.session.release()));
  return byKind;
}

describe.skipIf(!GCC)('int8 firmware: Add, Mul, Concat, Transpose and activation tables', () => {
  it('writes the new kernels into the library, with no double, libm or malloc', () => {
    const names = fs.readdirSync(f('fw'));
    for (const n of ['offramp_eltwise.c', 'offramp_layout.c']) expect(names).toContain(n);
    for (const n of names.filter((x) => /^offramp_(eltwise|layout|kernels|run|net)\.[ch]$/.test(x))) {
      const text = fs.readFileSync(f(`fw/${n}`), 'utf8').replace(/\/\*[\s\S]*?\*\//g, '');
      expect(text, n).not.toMatch(/\bdouble\b|<math\.h>|\bmalloc\b|\bfree\b/);
    }
  });

  it('lowers every operator of the net to a kernel step', () => {
    const { program } = loadProgram(f('q'));
    const kinds = new Set(program.stages.flatMap((s) => s.steps.map((t) => t.kind)));
    for (const k of ['conv', 'add', 'mul', 'lut', 'concat', 'transpose', 'slice', 'maxpool', 'avgpool', 'dense']) expect(kinds, k).toContain(k);
    console.log(`ops net: ${program.stages.map((s) => `stage ${s.index}: ${s.steps.map((t) => t.kind).join(' ')}`).join('; ')}`);
  });

  it('equals the integer reference bit for bit on every int8 tensor and every answer', () => {
    compileFirmware(f('fw'), f('fw.exe'));
    const { values, answers: fa, program } = expectReferenceEqual(f('fw.exe'), f('q'), val.subarray(0, 200 * PER), val);
    const exits = Array.from({ length: program.logits.length }, (_, k) => fa.exit.filter((e) => e === k).length);
    const labels = Array.from({ length: program.classes }, (_, k) => fa.label.filter((e) => e === k).length);
    console.log(`ops net int8 firmware (gcc): ${values} int8 values of 200 frames bit for bit equal to the reference; ${fa.label.length} answers equal; exits taken ${exits.join(' / ')}, labels ${labels.join(' / ')}`);
  });

  it('agrees with onnxruntime on the QDQ stage files: every int8 tensor within a step, label and exit', async () => {
    const { program, manifest, reach, outputs } = loadProgram(f('q'));
    const by = await ortTensors(f('q'), program, val.subarray(0, 200 * PER));
    console.log(`ops net int8 tensors vs onnxruntime (200 frames), by kernel, where the step's inputs were equal: ${[...by].map(([k, e]) => `${k} ${histogram(e.steps)}`).join('; ')}`);
    const after = [...by].filter(([, e]) => e.after.size);
    console.log(`  after an input already differed: ${after.length ? after.map(([k, e]) => `${k} ${histogram(e.after)}`).join('; ') : 'none (no input differed)'}`);
    const fa = firmwareAnswers(f('fw.exe'), val);
    const o = await againstOrt(f('q'), program, outputs, manifest.policy!.rule, reach, val, fa);
    const agree = 1 - o.differ.length / o.frames;
    console.log(`ops net int8 firmware vs onnxruntime on ${o.frames} frames: logits ${histogram(o.steps)}; label and exit equal on ${(agree * 100).toFixed(2)} %`);
    for (const [k, e] of by) expect(Math.max(...e.steps.keys()), k).toBeLessThanOrEqual(1);
    expect(Math.max(...o.steps.keys())).toBeLessThanOrEqual(1);
    expect(agree).toBeGreaterThanOrEqual(0.99);
  });
});

describe('int8 firmware: an operator without a kernel', () => {
  it('is refused by op type, node name and stage file: exit 1, nothing written', () => {
    saveModel(opsNet({ softmax: true }), f('soft.onnx'));
    for (const args of [
      ['graft', f('soft.onnx'), '--cuts', 'attended', '--data', f('fit.npy'), '-o', f('soft-g.onnx')],
      ['split', f('soft-g.onnx'), '-o', f('soft-split')],
      ['quantize', f('soft-split'), '--data', f('cal.npy'), '-o', f('soft-q')],
    ]) {
      const r = offramp(args);
      expect(r.code, `${args[0]}: ${r.stderr}`).toBe(0);
    }
    const stage0 = (JSON.parse(fs.readFileSync(f('soft-q/manifest.json'), 'utf8')) as { stages: { file: string }[] }).stages[0].file;
    const e = offramp(['emit-c', f('soft-q'), '-o', f('soft-fw'), '--policy', '{"kind":"confidence","thresholds":[0.9]}']);
    expect(e.code).toBe(1);
    expect(e.stderr.trim().split('\n')).toHaveLength(1);
    expect(e.stderr).toContain(path.join(f('soft-q'), stage0));
    expect(e.stderr).toContain("node 'attend' (Softmax)");
    expect(e.stderr).toMatch(/op Softmax has no int8 kernel/);
    expect(fs.existsSync(f('soft-fw'))).toBe(false);
    // into a folder that exists: left as it was
    fs.mkdirSync(f('soft-fw'));
    fs.writeFileSync(f('soft-fw/main.c'), 'int main(void) { return 0; }\n');
    expect(offramp(['emit-c', f('soft-q'), '-o', f('soft-fw'), '--policy', '{"kind":"confidence","thresholds":[0.9]}']).code).toBe(1);
    expect(fs.readdirSync(f('soft-fw'))).toEqual(['main.c']);
    console.log(`refused: ${e.stderr.trim()}`);
  });
});

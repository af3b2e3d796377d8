// Cut search, split and the staged runner on graphs built here. Every chain is
// checked against the whole model run in onnxruntime on the same inputs (the
// reference outside the project); expected cut positions follow from the graph
// shapes by hand, as noted at each case.
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { describe, it, expect, afterAll } from 'vitest';
import { modelBuilder, mulberry32, type ModelBuilder } from '../lib/graph/build.js';
import type { Model } from '../lib/graph/ir.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { scanModel, resolveCut, cutsAtFractions, type CutPlan } from '../lib/cuts/scan.js';
import { writeSplit } from '../lib/split/manifest.js';
import { loadChain } from '../lib/run/chain.js';
import { diffTensors } from '../lib/run/check.js';
import { openSession, runSession, randomTensor, tensorFromData, type OrtTensor } from '../lib/runtime/ort.js';
import { model as protoModel, vi, node, floatTensor } from './helpers/proto.js';
import { main } from '../lib/cli/main.js';
import { writeNpy } from '../lib/data/npy.js';

const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-split-'));
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
let seq = 0;

async function planFor(m: Model, name: string): Promise<{ file: string; plan: CutPlan }> {
  const file = path.join(tmp, `${name}.onnx`);
  saveModel(m, file);
  return { file, plan: await scanModel(loadModel(file)) };
}

async function runWhole(file: string, feeds: Record<string, OrtTensor>): Promise<Record<string, OrtTensor>> {
  const s = await openSession(fs.readFileSync(file), file);
  try { return await runSession(s, feeds); } finally { await s.release(); }
}

/** Split at `cuts`, run the chain and the whole model on `feeds`, expect equal outputs (rtol 1e-5). */
async function splitAndCompare(file: string, plan: CutPlan, cuts: ReturnType<typeof resolveCut>[], feeds: Record<string, OrtTensor>) {
  const dir = path.join(tmp, `split-${seq++}`);
  const res = writeSplit(plan, cuts, dir, file);
  const chain = await loadChain(dir);
  try {
    const got = await chain.run(feeds);
    const want = await runWhole(file, feeds);
    for (const [k, t] of Object.entries(want)) expect(diffTensors(k, got.outputs[k], t), k).toMatchObject({ ok: true });
    expect(got.exit).toBeNull();
    return { ...res, got, chain };
  } finally { await chain.release(); }
}

const conv = (b: ModelBuilder, x: string, cin: number, cout: number, k = 3, stride = 1) =>
  b.node('Conv', [x, b.init(b.fresh('w'), FLOAT, [cout, cin, k, k]), b.init(b.fresh('bias'), FLOAT, [cout])],
    { kernel_shape: [k, k], pads: Array(4).fill((k - 1) >> 1), strides: [stride, stride] });

const input = (shape: number[], seed = 3) => randomTensor({ dtype: FLOAT, shape }, mulberry32(seed));

describe('residual net', () => {
  // stem conv → 3 residual blocks (conv-relu-conv, + identity, relu) → GAP → Flatten → Gemm.
  // Inside a block the block input is live (the identity) beside the branch, so only block
  // boundaries and the stem/head chain can have one crossing tensor.
  function residual(opts: { exitAfter?: number } = {}) {
    const b = modelBuilder({ opset: 17, seed: 5 });
    let x = b.node('Relu', [conv(b, b.input('x', FLOAT, [1, 3, 16, 16]), 3, 8)], {}, { name: 'stem', outputs: ['stem_out'] })[0];
    const inner: string[] = [], blockOuts: string[] = [];
    for (let i = 0; i < 3; i++) {
      const a = conv(b, x, 8, 8), r = b.node('Relu', [a]), c = conv(b, r, 8, 8);
      inner.push(a, r, c);
      x = b.node('Relu', [b.node('Add', [c, x])], {}, { outputs: [`block${i}`] })[0];
      blockOuts.push(x);
    }
    const head = (from: string, out: string) => {
      const f = b.node('Flatten', [b.node('GlobalAveragePool', [from])], { axis: 1 });
      b.node('Gemm', [f, b.init(b.fresh('fc'), FLOAT, [10, 8]), b.init(b.fresh('fcb'), FLOAT, [10])], { transB: 1 }, { outputs: [out] });
      b.output(out, FLOAT, [1, 10]);
    };
    head(x, 'logits');
    // An exit head grafted on later sits at the end of the file, far from the tensor it reads.
    if (opts.exitAfter !== undefined) head(blockOuts[opts.exitAfter], 'exit-0');
    const m = b.build();
    if (opts.exitAfter !== undefined) m.proto.metadataProps = [{ key: 'offramp.exits', value: JSON.stringify([{ output: 'exit-0', cut: blockOuts[opts.exitAfter] }]) }];
    return { m, inner, blockOuts };
  }

  it('has clean cuts between blocks and never inside one; the chain matches the model', async () => {
    const { m, inner, blockOuts } = residual();
    const { file, plan } = await planFor(m, 'residual');
    const clean = plan.candidates.filter((c) => c.clean).map((c) => c.tensors[0].name);
    expect(clean).toEqual(expect.arrayContaining(['stem_out', ...blockOuts.slice(0, 2)]));
    for (const t of clean) expect(inner).not.toContain(t);
    // Inside a block: the block input crosses with the branch value.
    const insideBlock = plan.candidates.find((c) => c.tensors.some((t) => t.name === inner[1]))!;
    expect(insideBlock.tensors.map((t) => t.name).sort()).toEqual(['stem_out', inner[1]].sort());
    const { manifest } = await splitAndCompare(file, plan, plan.candidates.filter((c) => c.clean), { x: input([1, 3, 16, 16]) });
    expect(manifest.stages.length).toBe(plan.candidates.filter((c) => c.clean).length + 1);
    expect(manifest.stages.reduce((a, s) => a + s.macs, 0)).toBe(manifest.totals.macs);
    for (const s of manifest.stages.slice(1)) expect(s.inputs).toEqual([expect.objectContaining({ from: s.index - 1, dtype: 'float32' })]);
  });

  it('--at picks the clean cuts nearest the MAC shares', async () => {
    const { m } = residual();
    const { plan } = await planFor(m, 'residual-at');
    const cuts = cutsAtFractions(plan, [0.5]);
    const clean = plan.candidates.filter((c) => c.clean);
    const best = Math.min(...clean.map((c) => Math.abs(c.macFraction - 0.5)));
    expect(cuts).toHaveLength(1);
    expect(Math.abs(cuts[0].macFraction - 0.5)).toBe(best);
  });

  it('puts an exit head into the stage that computes its cut tensor, and the runner can stop there', async () => {
    const { m, blockOuts } = residual({ exitAfter: 0 });
    const { file, plan } = await planFor(m, 'residual-exit');
    expect(plan.exits).toEqual(['exit-0']);
    const cut = resolveCut(plan, blockOuts[0]);
    expect(cut.tensors.map((t) => t.name)).toEqual([blockOuts[0]]);
    const feeds = { x: input([1, 3, 16, 16]) };
    const { manifest } = await splitAndCompare(file, plan, [cut], feeds);
    expect(manifest.stages[0].exits).toEqual(['exit-0']);
    expect(manifest.stages[0].outputs.map((o) => o.name)).toEqual([blockOuts[0], 'exit-0']);
    expect(manifest.stages[1].exits).toEqual([]);
    const chain = await loadChain(path.join(tmp, `split-${seq - 1}`));
    const early = await chain.run(feeds, { policy: (e) => e.name === 'exit-0' });
    await chain.release();
    expect(early.exit).toBe('exit-0');
    expect(early.stagesRun).toBe(1);
    expect(early.macs).toBe(manifest.stages[0].macs);
    expect(Object.keys(early.outputs)).toEqual(['exit-0']);
    const whole = await runWhole(file, feeds);
    expect(diffTensors('exit-0', early.outputs['exit-0'], whole['exit-0']).ok).toBe(true);
  });
});

describe('node order', () => {
  it('uses the block-keeping order where the file computes a value long before its use', async () => {
    // The file computes scale = Exp(s) from a weight first and uses it last: in the file's order it
    // crosses every boundary (no clean cut); depth-first from the output puts it just before the Mul.
    const b = modelBuilder({ opset: 17, seed: 6 });
    const scale = b.node('Exp', [b.init('s', FLOAT, [1, 2, 1, 1])], {}, { outputs: ['scale'] })[0];
    let x = b.input('x', FLOAT, [1, 2, 8, 8]);
    for (let i = 0; i < 3; i++) x = b.node('Relu', [conv(b, x, 2, 2)], {}, { outputs: [`act${i}`] })[0];
    b.output(b.node('Mul', [x, scale], {}, { outputs: ['y'] })[0], FLOAT, [1, 2, 8, 8]);
    const { file, plan } = await planFor(b.build(), 'late-use');
    expect(plan.cleanBy.file).toBe(0);
    expect(plan.order).toBe('block');
    expect(plan.candidates.filter((c) => c.clean).map((c) => c.tensors[0].name)).toEqual(expect.arrayContaining(['act0', 'act1']));
    const { manifest } = await splitAndCompare(file, plan, [resolveCut(plan, 'act0'), resolveCut(plan, 'act1')], { x: input([1, 2, 8, 8]) });
    expect(manifest.order).toBe('block');
    expect(manifest.stages.map((s) => s.inputs.length)).toEqual([1, 1, 1]);
  });
});

describe('U-Net with skips', () => {
  // e1 = conv(x) [8×16×16] → pool → e2 = conv [16×8×8] → pool → b = conv [16×4×4] → up → concat e2 → d2 → up → concat e1 → d1.
  // While the decoder has not consumed them, e1 and e2 cross every boundary: two- and three-tensor cuts.
  function unet() {
    const b = modelBuilder({ opset: 17, seed: 9 });
    const pool = (x: string) => b.node('MaxPool', [x], { kernel_shape: [2, 2], strides: [2, 2] });
    const up = (x: string, c: number) => b.node('ConvTranspose', [x, b.init(b.fresh('up'), FLOAT, [c, c, 2, 2])], { kernel_shape: [2, 2], strides: [2, 2] });
    const e1 = b.node('Relu', [conv(b, b.input('x', FLOAT, [1, 3, 16, 16]), 3, 8)], {}, { outputs: ['e1'] })[0];
    const e2 = b.node('Relu', [conv(b, pool(e1), 8, 16)], {}, { outputs: ['e2'] })[0];
    const bott = b.node('Relu', [conv(b, pool(e2), 16, 16)], {}, { outputs: ['bottom'] })[0];
    const d2 = b.node('Relu', [conv(b, b.node('Concat', [up(bott, 16), e2], { axis: 1 }), 32, 8)], {}, { outputs: ['d2'] })[0];
    b.output(conv(b, b.node('Concat', [up(d2, 8), e1], { axis: 1 }), 16, 2, 1), FLOAT, [1, 2, 16, 16]);
    return b.build();
  }

  it('offers multi-tensor cuts and hands a skip over two stages', async () => {
    const { file, plan } = await planFor(unet(), 'unet');
    const names = (c: { tensors: { name: string }[] }) => c.tensors.map((t) => t.name).join('+');
    const all = plan.candidates.map(names);
    expect(all).toContain('e1+e2+bottom');
    expect(all).toContain('e1+d2');
    const cuts = [resolveCut(plan, 'e1+e2+bottom'), resolveCut(plan, 'd2')];
    expect(names(cuts[1])).toBe('e1+d2');
    const { manifest } = await splitAndCompare(file, plan, cuts, { x: input([1, 3, 16, 16]) });
    const last = manifest.stages[2];
    expect(last.inputs.map((i) => [i.name, i.from])).toEqual(expect.arrayContaining([['e1', 0], ['d2', 1]]));
    // e1 skips stage 1: the runner hands it from stage 0 straight to stage 2.
    expect(manifest.stages[0].outputs.find((o) => o.name === 'e1')!.to).toEqual([2]);
    expect(manifest.stages[1].cut).toEqual(['e1', 'd2']);
    expect(manifest.stages[0].handoverBytes).toBe((8 * 16 * 16 + 16 * 8 * 8 + 16 * 4 * 4) * 4);
  });
});

describe('two inputs, the second used late', () => {
  it('carries the late input across boundaries and feeds it straight to the stage that reads it', async () => {
    const b = modelBuilder({ opset: 17, seed: 2 });
    const h1 = b.node('Relu', [conv(b, b.input('image', FLOAT, [1, 3, 8, 8]), 3, 4)], {}, { outputs: ['h1'] })[0];
    const h2 = b.node('Relu', [conv(b, h1, 4, 4)], {}, { outputs: ['h2'] })[0];
    const f = b.node('Flatten', [b.node('GlobalAveragePool', [h2])], { axis: 1 }, { outputs: ['feat'] })[0];
    const side = b.input('bias_in', FLOAT, [1, 4]);
    b.node('Add', [f, side], {}, { outputs: ['y'] });
    b.output('y', FLOAT, [1, 4]);
    const { file, plan } = await planFor(b.build(), 'two-inputs');
    // bias_in is live from the start to the last node: every boundary has it and one activation.
    expect(plan.candidates.every((c) => c.tensors.some((t) => t.name === 'bias_in'))).toBe(true);
    expect(plan.candidates.filter((c) => c.clean)).toEqual([]);
    const cut = resolveCut(plan, 'h1');
    expect(cut.tensors.map((t) => t.name)).toEqual(['bias_in', 'h1']);
    const { manifest } = await splitAndCompare(file, plan, [cut], { image: input([1, 3, 8, 8]), bias_in: input([1, 4], 7) });
    expect(manifest.stages[0].inputs.map((i) => i.name)).toEqual(['image']);
    expect(manifest.stages[1].inputs.map((i) => [i.name, i.from])).toEqual([['h1', 0], ['bias_in', 'input']]);
  });
});

describe('If node', () => {
  // a = Relu(x); cond = ReduceSum(x) > 0; If(cond) then a·2 else a+1 (both read a from the outer scope); y = Relu(If).
  const body = (name: string, op: string, k: number) => ({
    name, node: [node(op, ['a', `${name}_k`], [`${name}_out`])], initializer: [floatTensor(`${name}_k`, [1], [k])],
    output: [vi(`${name}_out`, [1, 4])],
  });
  const m = protoModel([
    node('Relu', ['x'], ['a']),
    node('ReduceSum', ['x'], ['s'], [{ name: 'keepdims', type: 2, i: 0n }]),
    node('Greater', ['s', 'zero'], ['cond']),
    node('If', ['cond'], ['branch'], [{ name: 'then_branch', type: 5, g: body('then', 'Mul', 2) }, { name: 'else_branch', type: 5, g: body('else', 'Add', 1) }]),
    node('Relu', ['branch'], ['r']),
    node('Mul', ['r', 'w'], ['y']),
  ], [vi('x', [1, 4])], [vi('y', [1, 4])], [floatTensor('zero', [], [0]), floatTensor('w', [1, 4], [1, 2, 3, 4])]);

  it('moves the If as a whole, its captures read as stage inputs', async () => {
    const { file, plan } = await planFor(m, 'if');
    // Before the If, its capture a and its condition are both live.
    const before = resolveCut(plan, 'a+cond');
    expect(before.tensors.map((t) => t.name).sort()).toEqual(['a', 'cond']);
    const clean = plan.candidates.filter((c) => c.clean).map((c) => c.tensors[0].name);
    expect(clean).toEqual(['branch', 'r']);
    for (const x of [[1, 2, 3, 4], [-1, -2, -3, -4]]) {
      const feeds = { x: tensorFromData(FLOAT, [1, 4], Float32Array.from(x)) };
      const { manifest } = await splitAndCompare(file, plan, [before, resolveCut(plan, 'r')], feeds);
      expect(manifest.stages[1].inputs.map((i) => i.name).sort()).toEqual(['a', 'cond']);
      const stage1 = loadModel(path.join(tmp, `split-${seq - 1}`, manifest.stages[1].file));
      expect(stage1.graph.nodes.map((n) => n.op)).toEqual(['If', 'Relu']);
    }
  });
});

describe('split files', () => {
  const W = floatTensor('W', [8, 8], Array.from({ length: 64 }, (_, i) => (i % 7) / 7));
  const shared = protoModel([node('MatMul', ['x', 'W'], ['h']), node('Relu', ['h'], ['r']), node('MatMul', ['r', 'W'], ['z'])], [vi('x', [1, 8])], [vi('z', [1, 8])], [W]);

  it('copies a shared weight into both stages and says so', async () => {
    const { file, plan } = await planFor(shared, 'shared');
    const { manifest } = await splitAndCompare(file, plan, [resolveCut(plan, 'r')], { x: input([1, 8]) });
    expect(manifest.sharedWeights).toEqual([{ name: 'W', bytes: 256, stages: [0, 1] }]);
    expect(manifest.stages.map((s) => s.weightBytes)).toEqual([256, 256]);
    expect(manifest.stages[0].cut).toEqual(['r']);
    expect(manifest.stages[0].handoverBytes).toBe(32);
  });

  it('writes byte-identical files for the same inputs and leaves the model untouched', async () => {
    const { file, plan } = await planFor(shared, 'same');
    const before = crypto.createHash('sha256').update(fs.readFileSync(file)).digest('hex');
    const a = path.join(tmp, 'same-a'), b = path.join(tmp, 'same-b');
    writeSplit(plan, [resolveCut(plan, 'r')], a, file);
    writeSplit(await scanModel(loadModel(file)), [resolveCut(plan, 'r')], b, file);
    const list = fs.readdirSync(a).sort();
    // Stage files are named by their content: stage-K.<first 16 hex of the SHA-256>.onnx.
    expect(list).toHaveLength(3);
    expect(list[0]).toBe('manifest.json');
    list.slice(1).forEach((f, k) => expect(f).toBe(`stage-${k}.${crypto.createHash('sha256').update(fs.readFileSync(path.join(a, f))).digest('hex').slice(0, 16)}.onnx`));
    expect(fs.readdirSync(b).sort()).toEqual(list);
    for (const f of list) expect(fs.readFileSync(path.join(b, f)).equals(fs.readFileSync(path.join(a, f))), f).toBe(true);
    expect(crypto.createHash('sha256').update(fs.readFileSync(file)).digest('hex')).toBe(before);
    const manifest = JSON.parse(fs.readFileSync(path.join(a, 'manifest.json'), 'utf8'));
    expect(manifest).toMatchObject({ schema: 'offramp-manifest/1', source: { file: '../same.onnx', sha256: before } });
  });

  it('refuses a stage file changed after the split', async () => {
    const { file, plan } = await planFor(shared, 'tamper');
    const dir = path.join(tmp, 'tamper');
    writeSplit(plan, [resolveCut(plan, 'r')], dir, file);
    fs.appendFileSync(path.join(dir, JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8')).stages[1].file), Buffer.from([0]));
    await expect(loadChain(dir)).rejects.toThrow(/changed since the split/);
  });

  it('rejects cuts that name nothing, or the same boundary twice', async () => {
    const { plan } = await planFor(shared, 'bad');
    expect(() => resolveCut(plan, 'W')).toThrow(/names no activation/);
    expect(() => resolveCut(plan, 'z')).toThrow(/no boundary/);
    expect(() => writeSplit(plan, [resolveCut(plan, 'r'), resolveCut(plan, 'r')], path.join(tmp, 'bad'), path.join(tmp, 'bad.onnx'))).toThrow(/same boundary/);
  });
});

describe('commands', () => {
  const quiet = async (argv: string[]) => {
    const w = process.stdout.write.bind(process.stdout), e = process.stderr.write.bind(process.stderr);
    let out = '';
    process.stdout.write = ((s: string) => { out += s; return true; }) as typeof process.stdout.write;
    process.stderr.write = ((s: string) => { out += s; return true; }) as typeof process.stderr.write;
    try { return { code: await main(argv), out }; } finally { process.stdout.write = w; process.stderr.write = e; }
  };
  const net = () => {
    const b = modelBuilder({ opset: 17, seed: 4 });
    let x = b.input('x', FLOAT, [1, 2, 8, 8]);
    for (let i = 0; i < 4; i++) x = b.node('Relu', [conv(b, x, 2, 2)], {}, { outputs: [`act${i}`] })[0];
    b.output(x, FLOAT, [1, 2, 8, 8]);
    return b.build();
  };

  it('scan, split and check run end to end, with random inputs and with .npy data', async () => {
    const file = path.join(tmp, 'cli.onnx'), dir = path.join(tmp, 'cli-split');
    saveModel(net(), file);
    const scan = await quiet(['scan', file, '--json', '--top', '2']);
    expect(scan.code).toBe(0);
    const j = JSON.parse(scan.out);
    expect(j).toMatchObject({ schema: 'offramp-scan/1', order: 'file' });
    expect(j.candidates).toHaveLength(2);
    expect((await quiet(['scan', file])).out).toMatch(/clean cuts file 7, block-keeping 7/);
    const split = await quiet(['split', file, '--at', '50%', '-o', dir]);
    expect(split.code).toBe(0);
    expect(split.out).toMatch(/into 2 stages/);
    expect((await quiet(['check', dir, '--against', file, '--samples', '2'])).code).toBe(0);
    const npy = path.join(tmp, 'x.npy');
    writeNpy(npy, Float32Array.from({ length: 3 * 128 }, (_, i) => Math.sin(i)), [3, 2, 8, 8]);
    const withData = await quiet(['check', dir, '--against', file, '--data', npy]);
    expect(withData.code).toBe(0);
    expect(withData.out).toMatch(/3 samples \(from data\)/);
  });

  it('check exits 1 when the chain differs, 2 on usage errors', async () => {
    const file = path.join(tmp, 'cli2.onnx'), other = path.join(tmp, 'cli2-other.onnx'), dir = path.join(tmp, 'cli2-split');
    saveModel(net(), file);
    const b = modelBuilder({ opset: 17, seed: 99 });
    let x = b.input('x', FLOAT, [1, 2, 8, 8]);
    for (let i = 0; i < 4; i++) x = b.node('Relu', [conv(b, x, 2, 2)], {}, { outputs: [`act${i}`] })[0];
    b.output(x, FLOAT, [1, 2, 8, 8]);
    saveModel(b.build(), other);
    expect((await quiet(['split', file, '--cuts', 'act1', '-o', dir])).code).toBe(0);
    const bad = await quiet(['check', dir, '--against', other]);
    expect(bad.code).toBe(1);
    expect(bad.out).toMatch(/FAIL[\s\S]*differs from/);
    expect((await quiet(['split', file, '-o', dir])).code).toBe(2);
    expect((await quiet(['split', file, '--cuts', 'nope', '-o', dir])).code).toBe(2);
  });
});

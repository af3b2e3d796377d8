// emit-c on a quantized folder refuses what would make firmware contradict its stage files or write
// out of bounds: one line naming the file and the field, exit 1, the output folder as it was. And the
// measuring command's refusals: no toolchain (the Debian packages named, exit 2), a core QEMU has no
// machine for, a float folder.
import { describe, it, expect, beforeAll, afterAll } from 'vitest';
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { offramp } from './helpers/cli.js';
import { tinyMlp } from './helpers/nets.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import { mulberry32 } from '../lib/graph/build.js';
import type { Manifest } from '../lib/split/manifest.js';

const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-fwbad-'));
const f = (n: string) => path.join(tmp, n);
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
const sha = (b: Buffer) => crypto.createHash('sha256').update(b).digest('hex');
const POLICY = '{"kind":"confidence","thresholds":[0.9]}';

beforeAll(() => {
  saveModel(tinyMlp(), f('mlp.onnx'));
  const r = mulberry32(5);
  writeNpy(f('x.npy'), Float32Array.from({ length: 64 * 16 }, () => r() * 2 - 1), [64, 16]);
  writeNpy(f('y.npy'), Int32Array.from({ length: 64 }, () => Math.floor(r() * 4)), [64]);
  for (const a of [['graft', f('mlp.onnx'), '--at', '50%', '--data', f('x.npy'), '--labels', f('y.npy'), '-o', f('g.onnx')], ['split', f('g.onnx'), '-o', f('s')], ['quantize', f('s'), '--data', f('x.npy'), '-o', f('q')]]) {
    const c = offramp(a);
    if (c.code !== 0) throw new Error(`${a[0]}: ${c.stderr}`);
  }
});

/** A copy of the quantized folder changed by `edit`, the manifest's SHA-256s made to fit again. */
function tampered(name: string, edit: (m: Manifest, dir: string) => void): string {
  const dir = f(name);
  fs.cpSync(f('q'), dir, { recursive: true });
  const m = JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8')) as Manifest;
  edit(m, dir);
  for (const s of m.stages) s.sha256 = sha(fs.readFileSync(path.join(dir, s.file)));
  fs.writeFileSync(path.join(dir, 'manifest.json'), JSON.stringify(m, null, 2));
  return dir;
}

/** Rewrite one scalar float initializer of stage `k` whose name ends with `suffix`. */
function setScale(dir: string, m: Manifest, k: number, suffix: string, v: number): void {
  const file = path.join(dir, m.stages[k].file);
  const model = loadModel(file);
  const name = [...model.graph.initializers.keys()].find((n) => n.endsWith(suffix) && model.graph.initializers.get(n)!.dims?.length === 0)!;
  const t = model.graph.initializers.get(name)!;
  model.graph.initializers.set(name, { ...t, rawData: new Uint8Array(Float32Array.of(v).buffer), floatData: undefined });
  saveModel(model, file);
}

describe('emit-c on a bad quantized folder: one line, exit 1, nothing written', () => {
  it('works on the good folder', () => {
    const r = offramp(['emit-c', f('q'), '--policy', POLICY, '-o', f('ok')]);
    expect(r.code, r.stderr).toBe(0);
    expect(fs.existsSync(f('ok/offramp_model.h'))).toBe(true);
  });
  const cases: [string, (m: Manifest, dir: string) => void, RegExp][] = [
    ['an arena offset past the arena', (m) => { const b = m.stages[0].arena!.buffers.find((x) => x.name.endsWith('/int8'))!; b.offset = m.stages[0].arenaBytes! + 16; }, /arena|offset/],
    ['an exit scale doubled in the manifest', (m) => { const o = m.outputs.find((x) => x.name === 'exit-0')!; o.quant!.scale *= 2; }, /quant of 'exit-0'|scale/],
    ['a missing exit quant', (m) => { delete m.outputs.find((x) => x.name === 'exit-0')!.quant; }, /quant/],
    ['a scale of 0 in a stage file', (m, dir) => setScale(dir, m, 1, '/scale', 0), /scale|positive/],
  ];
  for (const [what, edit, want] of cases) {
    it(what, () => {
      const dir = tampered(what.replace(/\W+/g, '-'), edit);
      const out = f(`out-${what.replace(/\W+/g, '-')}`);
      fs.mkdirSync(out);
      fs.writeFileSync(path.join(out, 'keep.txt'), 'mine');
      const r = offramp(['emit-c', dir, '--policy', POLICY, '-o', out]);
      expect(r.code, r.stdout).toBe(1);
      const lines = r.stderr.trim().split('\n');
      expect(lines).toHaveLength(1);
      expect(lines[0]).toMatch(want);
      expect(lines[0]).toMatch(/manifest\.json|stage-\d/);
      expect(fs.readdirSync(out)).toEqual(['keep.txt']);
    });
  }
  it('an op without an int8 kernel: refused by op type, node and stage file', () => {
    const dir = tampered('softmax', (m, d) => {
      const file = path.join(d, m.stages[0].file);
      const model = loadModel(file);
      // a Softmax between the first kernel's output and its QuantizeLinear, as a float op inside the int8 chain
      const q = model.graph.nodes.findIndex((n) => n.op === 'QuantizeLinear' && n.inputs[0] !== model.graph.inputs[0].name);
      const n = model.graph.nodes[q];
      const soft = { ...n, op: 'Softmax', name: 'odd_softmax', inputs: [n.inputs[0]], outputs: [`${n.inputs[0]}/soft`], attrs: new Map(), proto: { opType: 'Softmax', input: [n.inputs[0]], output: [`${n.inputs[0]}/soft`], name: 'odd_softmax' } };
      model.graph.nodes.splice(q, 1, soft as typeof n, { ...n, inputs: [`${n.inputs[0]}/soft`, ...n.inputs.slice(1)], proto: { ...n.proto, input: [`${n.inputs[0]}/soft`, ...n.inputs.slice(1)] } });
      saveModel(model, file);
    });
    const out = f('out-softmax');
    const r = offramp(['emit-c', dir, '--policy', POLICY, '-o', out]);
    expect(r.code, r.stdout).toBe(1);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr, r.stderr).toMatch(/Softmax/);
    expect(r.stderr).toMatch(/stage-0/);
    expect(fs.existsSync(out)).toBe(false);
  });
});

describe('offramp measure refusals', () => {
  it('without the toolchain: the Debian packages named, exit 2', () => {
    const node = process.execPath;
    const bin = path.resolve(import.meta.dirname, '../bin/offramp.js');
    const r = spawnSync(node, [bin, 'measure', f('q'), '--data', f('x.npy')], { encoding: 'utf8', env: { ...process.env, PATH: fs.mkdtempSync(path.join(tmp, 'nopath-')) } });
    expect(r.status).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm/);
  });
  it('m0plus: no QEMU machine, exit 2; a float folder, exit 2', () => {
    const a = offramp(['measure', f('q'), '--data', f('x.npy'), '--core', 'm0plus']);
    expect(a.code).toBe(2);
    expect(a.stderr).toMatch(/Cortex-M0\+|m0plus/);
    const b = offramp(['measure', f('s'), '--data', f('x.npy')]);
    expect(b.code).toBe(2);
    expect(b.stderr).toMatch(/quantize|int8/);
  });
});

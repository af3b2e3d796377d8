// build --int8 on a tiny MLP (seconds): the int8 chain's policy is certified like the float one
// (the build's confidence and unlabelled rows reach its tuning, its guarantee is in the int8
// manifest and the report), and DIR/int8 is a split folder whose stage files are named by their
// own content. The certification math itself is checked against SciPy and by simulation in
// certify.test.ts and tune-coverage.test.ts; here the question is whether build --int8 uses it.
import { describe, it, expect, beforeAll } from 'vitest';
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { mulberry32 } from '../lib/graph/build.js';
import { tinyMlp } from './helpers/nets.js';
import { saveModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import type { Manifest } from '../lib/split/manifest.js';
import { loadModel } from '../lib/graph/io.js';
import { offramp } from './helpers/cli.js';
import { folderProblems } from './helpers/folder-check.js';

let tmp: string, model: string, data: string, labels: string, free: string;
const sha = (f: string) => crypto.createHash('sha256').update(fs.readFileSync(f)).digest('hex');

beforeAll(() => {
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-int8b-'));
  model = path.join(tmp, 'mlp.onnx');
  saveModel(tinyMlp(), model);
  const r = mulberry32(3);
  data = path.join(tmp, 'x.npy');
  writeNpy(data, Float32Array.from({ length: 48 * 16 }, () => r() * 2 - 1), [48, 16]);
  labels = path.join(tmp, 'y.npy');
  writeNpy(labels, Int32Array.from({ length: 48 }, () => Math.floor(r() * 4)), [48]);
  free = path.join(tmp, 'u.npy');
  writeNpy(free, Float32Array.from({ length: 40 * 16 }, () => r() * 2 - 1), [40, 16]);
});

const build = (out: string, extra: string[]) => offramp(['build', model, '--data', data, '--candidates', '3', '--target', 'm4f', '--int8', '-o', out, ...extra]);

describe('build --int8', () => {
  it('tunes the int8 chain with the build\'s confidence and unlabelled rows; tiny data keeps the full int8 chain and says so', () => {
    const out = path.join(tmp, 'a');
    const r = build(out, ['--labels', labels, '--unlabelled', free, '--confidence', '0.9', '--json']);
    expect(r.code, r.stderr).toBe(0);
    const b = JSON.parse(r.stdout);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'int8/manifest.json'), 'utf8')) as Manifest;
    const g = m.policy!.guarantee!;
    expect(g).toBeDefined();
    expect(b.int8.guarantee).toEqual(g);
    // 40 unlabelled rows, more than the 24 labelled tuning rows: disagreement on all rows bounds, and the unlabelled
    // rows are split like the labelled ones, half of them certifying
    expect(g).toMatchObject({ confidence: 0.9, maxDrop: 1, unit: 'samples', unlabelled: 20 });
    // 24 tuning rows, about half of them certifying: far fewer than ln(2/δ)/maxDrop (common practice:
    // the zero-loss Clopper–Pearson count, ≈ 300 at 1 point and δ = 0.1), so nothing is certified
    // and the rule is the full int8 chain.
    expect(g.certified).toBe(false);
    expect(g.evidence).toBe(b.int8.heldOut.samples);
    expect(b.int8.heldOut.meanMacs).toBe(b.int8.heldOut.fullMacs);
    expect(b.int8.heldOut.exitShare.at(-1)).toBe(1);
    // the float build's promise is made on the same terms
    expect(b.guarantee).toMatchObject({ confidence: 0.9, unlabelled: 20, certified: false });
    // the deployed int8 chain against the float model, on the same labelled certifying rows (observed)
    expect(b.schema).toBe('offramp-build/3');
    expect(b.int8.againstFloat).toEqual({ samples: b.int8.heldOut.samples, accuracy: b.int8.heldOut.accuracy, floatAccuracy: b.heldOut.fullAccuracy,
      dropPoints: expect.closeTo((b.heldOut.fullAccuracy - b.int8.heldOut.accuracy) * 100, 9) });
    // DIR/int8 is whole and its stage files are named by their own bytes, not the float stages' (the checker recomputes each SHA-256)
    expect(folderProblems(out)).toEqual([]);
    expect(m.stages.map((s) => s.file)).toEqual(m.stages.map((s) => `stage-${s.index}.${sha(path.join(out, 'int8', s.file)).slice(0, 16)}.onnx`));
    const float = JSON.parse(fs.readFileSync(path.join(out, 'manifest.json'), 'utf8')) as Manifest;
    for (const s of m.stages) expect(s.file).not.toBe(float.stages[s.index].file);
  });

  it('prints the int8 promise as the float one; a certifiable promise is kept', () => {
    const out = path.join(tmp, 'b');
    const r = build(out, ['--max-drop', '100']);
    expect(r.code, r.stderr).toBe(0);
    // by default the deployed (int8) chain's promise, in words; a drop of 100 points is always within the bound
    const promises = r.stdout.split('\n').filter((l) => l.startsWith('promise    '));
    expect(promises).toEqual([expect.stringMatching(/^promise    on new data like this, accuracy drops by at most 100 points against the full int8 chain, with 95 % confidence \(certified on \d+ samples: bound /)]);
    expect(r.stdout).not.toMatch(/^held out /m);
    // --verbose adds the method form of both: under the float policy and under the int8 policy
    const v = build(path.join(tmp, 'bv'), ['--max-drop', '100', '--verbose']);
    const both = v.stdout.split('\n').filter((l) => / drop ≤ 100 pp on new data with 95 % confidence — certified bound /.test(l));
    expect(both).toHaveLength(2);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'int8/manifest.json'), 'utf8')) as Manifest;
    expect(m.policy!.guarantee).toMatchObject({ certified: true, maxDrop: 100, confidence: 0.95 });
    const html = fs.readFileSync(path.join(out, 'report.html'), 'utf8');
    // the page describes the int8 chain: its promise in words, its method, and the float chain's beside it
    expect(html).toContain('data-chain="int8"');
    // without labels there is no accuracy to set against the float model's
    expect(JSON.parse(fs.readFileSync(path.join(out, 'report.json'), 'utf8')).int8.againstFloat).toBeNull();
    expect(html.match(/How it is certified: drop ≤ 100 pp/g)).toHaveLength(1);
    expect(html).toContain('accuracy drops by at most 100 points against the full int8 chain');
    expect(html).toContain('accuracy drops by at most 100 points against the full model');
    for (const st of m.stages) expect(html).toContain(st.file);
  });
});

describe('arena plans of a quantized split', () => {
  it('each QDQ stage file has its own plan: its value names, int8 sizes, no two buffers alive together overlap; emit-c writes that plan', () => {
    // the build of the first test: DIR/int8 is a quantized split with a policy (emit-c needs one)
    const split = path.join(tmp, 'a'), q = path.join(tmp, 'a/int8'), fw = path.join(tmp, 'fw');
    const r = offramp(['emit-c', q, '-o', fw]);
    expect(r.code, r.stderr).toBe(0);
    const m = JSON.parse(fs.readFileSync(path.join(q, 'manifest.json'), 'utf8')) as Manifest;
    const float = JSON.parse(fs.readFileSync(path.join(split, 'manifest.json'), 'utf8')) as Manifest;
    const rows: string[] = [];
    for (const s of m.stages) {
      const g = loadModel(path.join(q, s.file)).graph;
      // the file's own values: inputs and node outputs (ONNX files list nodes in a topological order: common practice, the spec requires it)
      const made = new Map<string, number>();
      for (const v of g.inputs) made.set(v.name, -1);
      g.nodes.forEach((n, i) => { for (const x of n.inputs) if (x) expect(made.has(x) || g.initializers.has(x), `${s.file}: ${x} before it is made`).toBe(true); for (const o of n.outputs) made.set(o, i); });
      const a = s.arena!;
      expect(a.buffers.length).toBeGreaterThan(0);
      for (const b of a.buffers) {
        expect(made.has(b.name), `${s.file}: ${b.name}`).toBe(true);
        expect(g.initializers.has(b.name)).toBe(false);
        expect(b.offset % a.align).toBe(0);
        expect(b.offset + b.bytes).toBeLessThanOrEqual(s.arenaBytes!);
      }
      // the int8 values a QuantizeLinear makes are held at 1 byte per element (ONNX QuantizeLinear, int8 output)
      const qOut = new Set(g.nodes.filter((n) => n.op === 'QuantizeLinear').map((n) => n.outputs[0]));
      const quantized = a.buffers.filter((b) => qOut.has(b.name));
      expect(quantized.length).toBeGreaterThan(0);
      for (const b of quantized) {
        const v = [...g.outputs, ...g.valueInfo.values()].find((x) => x.name === b.name);
        if (v?.type.shape) expect(b.bytes).toBe(v.type.shape.reduce<number>((p, d) => p * (d as number), 1));
      }
      // no float value of a QDQ kernel gets a buffer of its own: MatMul outputs are their QuantizeLinear's int8 buffers
      for (const n of g.nodes.filter((x) => x.op === 'MatMul')) expect(a.buffers.map((b) => b.name)).not.toContain(n.outputs[0]);
      // never two buffers in the same bytes while both are needed (the arena plan's contract, DEVELOPERS.md)
      for (const x of a.buffers) for (const y of a.buffers) {
        if (x === y || x.last < y.first || y.last < x.first) continue;
        expect(x.offset + x.bytes <= y.offset || y.offset + y.bytes <= x.offset, `${s.file}: ${x.name} and ${y.name}`).toBe(true);
      }
      expect(s.arenaBytes).toBeLessThan(float.stages[s.index].arenaBytes!);
      for (const b of a.buffers) rows.push(`  { "${b.name}", ${b.offset}u, ${b.bytes}u, ${b.first}u, ${b.last}u },`);
      rows.push(`#${s.index} ${s.arenaBytes}`);
    }
    // the firmware table is that plan, row for row, and its arena the largest stage's
    const c99 = fs.readFileSync(path.join(fw, 'offramp_policy.c'), 'utf8');
    const table = c99.slice(c99.indexOf('offramp_buffers[OFFRAMP_BUFFERS + 1] = {'));
    expect(rows.filter((r) => !r.startsWith('#')).join('\n')).toBe(table.slice(table.indexOf('\n') + 1, table.indexOf('\n  { 0, 0u')));
    const h = fs.readFileSync(path.join(fw, 'offramp_policy.h'), 'utf8');
    expect(Number(/#define OFFRAMP_ARENA_BYTES (\d+)u/.exec(h)![1])).toBe(Math.max(...m.stages.map((s) => s.arenaBytes!)));
    console.log(`QDQ arenas vs float: ${m.stages.map((s) => `${s.arenaBytes} B / ${float.stages[s.index].arenaBytes} B`).join(', ')}`);
  });
});

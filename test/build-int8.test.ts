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
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { saveModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import type { Manifest } from '../lib/split/manifest.js';
import { offramp } from './helpers/cli.js';
import { folderProblems } from './helpers/folder-check.js';

let tmp: string, model: string, data: string, labels: string, free: string;
const sha = (f: string) => crypto.createHash('sha256').update(fs.readFileSync(f)).digest('hex');

beforeAll(() => {
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-int8b-'));
  const b = modelBuilder({ opset: 17, seed: 5 });
  let x = b.input('x', 1, ['N', 16]);
  for (let i = 0; i < 3; i++) x = b.node('Relu', [b.node('MatMul', [x, b.init(`w${i}`, 1, [i ? 24 : 16, 24])])]);
  b.output(b.node('MatMul', [x, b.init('wo', 1, [24, 4])]), 1, ['N', 4]);
  model = path.join(tmp, 'mlp.onnx');
  saveModel(b.build(), model);
  const r = mulberry32(3);
  data = path.join(tmp, 'x.npy');
  writeNpy(data, Float32Array.from({ length: 48 * 16 }, () => r() * 2 - 1), [48, 16]);
  labels = path.join(tmp, 'y.npy');
  writeNpy(labels, Int32Array.from({ length: 48 }, () => Math.floor(r() * 4)), [48]);
  free = path.join(tmp, 'u.npy');
  writeNpy(free, Float32Array.from({ length: 20 * 16 }, () => r() * 2 - 1), [20, 16]);
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
    const promises = r.stdout.split('\n').filter((l) => l.startsWith('promise    '));
    // one under the float policy, one under the int8 policy; a drop of 100 points is always within the bound
    expect(promises).toHaveLength(2);
    for (const l of promises) expect(l).toMatch(/^promise    drop ≤ 100 pp on new data with 95 % confidence — certified bound /);
    expect(r.stdout).not.toMatch(/^held out /m);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'int8/manifest.json'), 'utf8')) as Manifest;
    expect(m.policy!.guarantee).toMatchObject({ certified: true, maxDrop: 100, confidence: 0.95 });
    const html = fs.readFileSync(path.join(out, 'report.html'), 'utf8');
    expect(html.match(/<b>promise: drop ≤ 100 pp/g)).toHaveLength(2);
  });
});

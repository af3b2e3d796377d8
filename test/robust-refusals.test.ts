// Issue 16, "refusals missing or unclear": each case the exact command, its exit code (2 usage, 1 data),
// one line naming the file or option, and nothing on disk changed. Before the fixes these ran on: the same
// rows counted twice in a bound, "internal error … k=NaN", "0 % confidence — certified", "promised ≤ abc
// pp", firmware contradicting its stage files or writing past its arena, "Infinity" int8 steps.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { cli, makeFixture, oneLine, snapshot, type Fixture } from './helpers/robust.js';
import type { Manifest } from '../lib/split/manifest.js';

let f: Fixture, p: (name: string) => string, q: string;
const manifestOf = (dir: string) => JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8')) as Manifest;
const POLICY = '{"kind":"confidence","thresholds":[0.9,0.9]}';

/** A copy of `from` whose manifest `edit` changed, as a hand edit or a stray tool would. */
function edited(from: string, name: string, edit: (m: Manifest) => void): string {
  const dir = p(name);
  fs.cpSync(from, dir, { recursive: true });
  const m = manifestOf(dir);
  edit(m);
  fs.writeFileSync(path.join(dir, 'manifest.json'), JSON.stringify(m, null, 2) + '\n');
  return dir;
}

beforeAll(async () => {
  f = await makeFixture('refusals');
  p = (name) => path.join(f.dir, name);
  fs.symlinkSync('x.npy', p('x-link.npy'));
  fs.copyFileSync(f.x, p('x-copy.npy'));
  q = p('q');
  const r = await cli(['quantize', f.split, '--data', f.x, '-o', q]);
  expect(r.code, r.stderr).toBe(0);
}, 120_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

describe('usage refusals, exit 2, nothing changed', () => {
  const cases: [string, () => string[], RegExp[]][] = [
    ['tune --unlabelled the --data file', () => ['tune', f.split, '--data', f.x, '--unlabelled', f.x], [/--unlabelled .*x\.npy: holds the same rows as --data/, /counted twice/]],
    ['tune --unlabelled a link to the --data file', () => ['tune', f.split, '--data', f.x, '--unlabelled', p('x-link.npy')], [/--unlabelled .*x-link\.npy: holds the same rows/]],
    ['tune --unlabelled a copy of the --data file', () => ['tune', f.split, '--data', f.x, '--unlabelled', p('x-copy.npy')], [/holds the same rows/]],
    ['build --unlabelled the --data file', () => ['build', f.model, '--data', f.x, '--unlabelled', p('x-link.npy'), '-o', p('b')], [/holds the same rows as --data/]],
    ['tune --held-out 1e-300', () => ['tune', f.split, '--data', f.x, '--held-out', '1e-300'], [/--held-out takes a number from 0.05 up to 0.95, not '1e-300': the search and the certification each need/]],
    ['tune --held-out 0.99', () => ['tune', f.split, '--data', f.x, '--held-out', '0.99'], [/--held-out takes a number from 0.05 up to 0.95/]],
    ['tune --confidence 1e-300', () => ['tune', f.split, '--data', f.x, '--confidence', '1e-300'], [/--confidence takes a number from 0.5 below 1, not '1e-300': a promise held with less than even odds promises nothing/]],
    // fan-monitor's clean cuts (offramp scan): 10 % and 11 % both reach the first block's MaxPool at 7.7 %; 99.9 % reaches /Flatten, before only the classifier's Gemm
    ['graft --at two shares that land on one cut', () => ['graft', f.model, '--at', '10%,11%', '--data', f.x, '-o', p('g.onnx')], [/--at 10% and 11% both land on the cut '\/b1\/b1\.3\/MaxPool_output_0' \(at 7\.7 % of the MACs\): one exit there, not two/]],
    ['graft --at a share past every MAC that matters', () => ['graft', f.model, '--at', '99.9%', '--data', f.x, '-o', p('g.onnx')], [/--at 99\.9%: the nearest clean cut, '\/Flatten_output_0', comes after 99\.\d\d % of the MACs: an exit there saves nothing/]],
    ['build --confidence 0.3', () => ['build', f.model, '--data', f.x, '--confidence', '0.3', '-o', p('b')], [/--confidence takes a number from 0.5/]],
  ];
  for (const [name, args, has] of cases) {
    test(name, async () => {
      const before = snapshot(f.dir);
      oneLine(await cli(args()), 2, ...has);
      expect(snapshot(f.dir)).toEqual(before);
    });
  }
  test('the range still takes the usual values', async () => {
    const r = await cli(['tune', f.split, '--data', f.x, '--labels', f.y, '--held-out', '0.05', '--confidence', '0.5', '--no-write']);
    expect(r.code, r.stderr).toBe(0);
  });
});

describe('a manifest whose guarantee, quant or arena is not what the files say: exit 1, one line naming the manifest', () => {
  const guarantee = (name: string, edit: (g: Record<string, unknown>) => void) =>
    edited(f.split, name, (m) => { edit(m.policy!.guarantee as unknown as Record<string, unknown>); });
  const cases: [string, () => string[], RegExp][] = [
    ['maxDrop "abc"', () => ['replay', guarantee('g1', (g) => { g.maxDrop = 'abc'; }), '--data', f.x, '--labels', f.y], /manifest\.json: policy: guarantee\.maxDrop is "abc": a number between 0 and 100/],
    ['confidence 5', () => ['replay', guarantee('g2', (g) => { g.confidence = 5; }), '--data', f.x, '--labels', f.y], /guarantee\.confidence is 5: a number strictly between 0 and 1/],
    ['maxDrop removed', () => ['replay', guarantee('g3', (g) => { delete g.maxDrop; }), '--data', f.x, '--labels', f.y], /guarantee\.maxDrop is undefined/],
    ['certified "yes"', () => ['emit-c', guarantee('g4', (g) => { g.certified = 'yes'; }), '-o', p('fw-g4')], /guarantee\.certified is "yes"/],
    ['a policy with the wrong number of thresholds', () => ['replay', edited(f.split, 'pol', (m) => { m.policy!.rule = { kind: 'confidence', thresholds: [0.5] }; }), '--data', f.x], /pol\/manifest\.json: policy: confidence needs 2 thresholds/],
    ['an arena buffer past arenaBytes', () => ['emit-c', edited(f.split, 'arena', (m) => { m.stages[0].arena!.buffers[0].offset = m.stages[0].arenaBytes!; }), '-o', p('fw-arena')], /stages\[0\]: arena buffer '.*' ends at byte \d+, past arenaBytes \d+/],
    ['check on an int8 scale of 0', () => ['check', edited(q, 'q-zero', (m) => { m.outputs[0].quant!.scale = 0; }), '--against', f.grafted], /quant\.scale of '.*' is 0: a positive finite number/],
    ['an int8 zero point of 300', () => ['check', edited(q, 'q-zp', (m) => { m.outputs[1].quant!.zeroPoint = 300; }), '--against', f.grafted], /quant\.zeroPoint of '.*' is 300/],
  ];
  for (const [name, args, has] of cases) {
    test(name, async () => {
      const a = args();
      const before = snapshot(f.dir);
      oneLine(await cli(a), 1, /manifest\.json/, has);
      expect(snapshot(f.dir)).toEqual(before);
    });
  }
});

describe('emit-c refuses firmware that would contradict the quantized stage files', () => {
  const exit = (m: Manifest) => m.outputs.findIndex((t) => t.name === 'exit-0');
  const cases: [string, (name: string) => string, RegExp][] = [
    ["an exit's quant.scale doubled", (n) => edited(q, n, (m) => { m.outputs[exit(m)].quant!.scale *= 2; }), /outputs\[\d\]: quant of 'exit-0' \(scale .*\) differs from its stage file stage-0\.[0-9a-f]{16}\.onnx/],
    ["an exit's zero point moved", (n) => edited(q, n, (m) => { m.outputs[exit(m)].quant!.zeroPoint += 1; }), /quant of 'exit-0' .* differs from its stage file/],
    ["an exit's quant removed (the _q8 table would be dropped)", (n) => edited(q, n, (m) => { delete m.outputs[exit(m)].quant; }), /'exit-0' has no quant: the int8 decision functions need its scale and zero point/],
    ['a float stage inside the quantized chain', (n) => {
      const dir = edited(q, n, (m) => {
        const fl = manifestOf(f.split).stages[0];
        m.stages[0] = { ...m.stages[0], file: fl.file, sha256: fl.sha256 };
      });
      fs.copyFileSync(path.join(f.split, manifestOf(f.split).stages[0].file), path.join(dir, manifestOf(f.split).stages[0].file));
      return dir;
    }, /stages\[0\]: stage 0 \(stage-0\.[0-9a-f]{16}\.onnx\) holds no QuantizeLinear or DequantizeLinear: a float stage inside a quantized chain/],
  ];
  for (const [name, make, has] of cases) {
    test(name, async () => {
      const dir = make(name.replace(/\W+/g, '-'));
      const out = p(`fw-${name.replace(/\W+/g, '-')}`);
      const before = snapshot(f.dir);
      oneLine(await cli(['emit-c', dir, '--policy', POLICY, '-o', out]), 1, /manifest\.json/, has);
      expect(snapshot(f.dir)).toEqual(before);
      expect(fs.existsSync(out)).toBe(false);
    });
  }
  test('the quantized folder as written passes', async () => {
    const r = await cli(['emit-c', q, '--policy', POLICY, '-o', p('fw-q')]);
    expect(r.code, r.stderr).toBe(0);
    expect(fs.readFileSync(p('fw-q/offramp_policy.c'), 'utf8')).toMatch(/_q8/);
  });
});

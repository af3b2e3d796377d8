// Issue 11, group 1: an output path that is, or resolves through a symbolic or hard link to, a file the
// command reads is refused (exit 2, one line) and nothing on disk changes. Before the guard, `cost -o
// MODEL`, `graft -o DATA`, `tune --report MANIFEST` and `replay --csv STAGE` overwrote their input, exit 0.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { cli, makeFixture, oneLine, snapshot, type Fixture } from './helpers/robust.js';
import { writeNpy } from '../lib/data/npy.js';
import { ROWS } from './helpers/robust.js';

// Stage files are named by their content: the manifest says which is which.
const stageFile = (dir: string, k: number) => path.join(dir, JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8')).stages[k].file as string);

let f: Fixture, p: (name: string) => string;

beforeAll(async () => {
  f = await makeFixture('outputs');
  p = (name) => path.join(f.dir, name);
  fs.symlinkSync('model.onnx', p('model-link.onnx'));
  fs.linkSync(f.model, p('model-hard.onnx'));
  fs.symlinkSync('x.npy', p('x-link.npy'));
  fs.writeFileSync(p('target.json'), JSON.stringify({ name: 'part', flashBytes: '1MiB', ramBytes: '256KiB', clockMhz: 80, macsPerCycle: 0.5 }));
  fs.writeFileSync(p('policy.json'), JSON.stringify({ kind: 'confidence', thresholds: [0.9, 0.9] }));
  writeNpy(p('seg.npy'), new Int32Array(ROWS), [ROWS]);
  // Output folders holding links to inputs under the names the commands write.
  fs.mkdirSync(p('split-trap'));
  fs.linkSync(f.model, p('split-trap/stage-1.onnx'));
  fs.mkdirSync(p('build-trap'));
  fs.linkSync(f.x, p('build-trap/report.json'));
  fs.mkdirSync(p('build-trap2'));
  fs.symlinkSync('../model.onnx', p('build-trap2/model.onnx'));
  fs.mkdirSync(p('c-trap'));
  fs.symlinkSync('../split/manifest.json', p('c-trap/offramp_policy.c'));
  fs.mkdirSync(p('c-trap2'));
  fs.linkSync(p('policy.json'), p('c-trap2/offramp_policy.h'));
}, 60_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

describe('an output that names an input is refused and nothing changes', () => {
  const cases: [string, () => string[], RegExp][] = [
    ['cost -o the model', () => ['cost', f.model, '-o', f.model], /model/],
    ['cost -o a symbolic link to the model', () => ['cost', f.model, '-o', p('model-link.onnx')], /model/],
    ['cost -o a hard link to the model', () => ['cost', f.model, '-o', p('model-hard.onnx')], /model/],
    ['cost --save-reordered over the model', () => ['cost', f.model, '--save-reordered', p('model-link.onnx')], /model/],
    ['cost -o its target profile', () => ['cost', f.model, '--target', p('target.json'), '-o', p('target.json')], /target profile/],
    ['scan -o the model', () => ['scan', f.model, '-o', p('model-hard.onnx')], /model/],
    ['graft -o the data', () => ['graft', f.model, '--at', '10%', '--data', f.x, '--labels', f.y, '-o', f.x], /data/],
    ['graft -o a link to the data', () => ['graft', f.model, '--at', '10%', '--data', f.x, '-o', p('x-link.npy')], /data/],
    ['graft -o the labels', () => ['graft', f.model, '--at', '10%', '--data', f.x, '--labels', f.y, '-o', f.y], /labels/],
    ['graft -o the model', () => ['graft', f.model, '--at', '10%', '--data', f.x, '-o', p('model-link.onnx')], /model/],
    ['split into a folder whose stage file is the model', () => ['split', f.model, '--at', '30%,60%', '-o', p('split-trap')], /model/],
    ['tune --report the manifest', () => ['tune', f.split, '--data', f.x, '--labels', f.y, '--report', path.join(f.split, 'manifest.json')], /manifest/],
    ['tune --report the data', () => ['tune', f.split, '--data', f.x, '--report', p('x-link.npy')], /data/],
    ['tune --report a stage file', () => ['tune', f.split, '--data', f.x, '--report', stageFile(f.split, 0)], /stage file/],
    ['replay --csv the data', () => ['replay', f.split, '--data', f.x, '--csv', f.x], /data/],
    ['replay --csv a stage file', () => ['replay', f.split, '--data', f.x, '--csv', stageFile(f.split, 1)], /stage file/],
    ['replay --csv the labels', () => ['replay', f.split, '--data', f.x, '--labels', f.y, '--csv', f.y], /labels/],
    ['replay --csv the recording ids', () => ['replay', f.split, '--data', f.x, '--recordings', p('seg.npy'), '--csv', p('seg.npy')], /recordings/],
    ['replay --csv the policy file', () => ['replay', f.split, '--data', f.x, '--policy', p('policy.json'), '--csv', p('policy.json')], /policy/],
    ['build into a folder whose report.json is the data', () => ['build', f.model, '--data', f.x, '-o', p('build-trap')], /data/],
    ['build into a folder whose model.onnx is the model', () => ['build', f.model, '--data', f.x, '-o', p('build-trap2')], /model/],
    ['emit-c into a folder whose C file is the manifest', () => ['emit-c', f.split, '-o', p('c-trap')], /manifest/],
    ['emit-c into a folder whose header is the policy file', () => ['emit-c', f.split, '--policy', p('policy.json'), '-o', p('c-trap2')], /policy/],
  ];
  for (const [name, args, role] of cases) {
    test(name, async () => {
      const before = snapshot(f.dir);
      const r = await cli(args());
      oneLine(r, 2, /refusing to write over an input/, role);
      expect(snapshot(f.dir)).toEqual(before);
    });
  }

  test('an output that is not an input is still written', async () => {
    const out = p('cost.txt');
    expect((await cli(['cost', f.model, '--no-nodes', '-o', out])).code).toBe(0);
    expect(fs.readFileSync(out, 'utf8')).toMatch(/MACs/);
  });
});

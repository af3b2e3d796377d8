// Issue 11, groups 4 and 6: every failure a user can cause is one line naming the path and the problem,
// exit 1 (data) or 2 (usage); never "internal error". A FIFO or other non-regular file is refused at once
// instead of blocking a read forever.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import { spawnSync, execFileSync } from 'node:child_process';
import fs from 'node:fs';
import path from 'node:path';
import { cli, makeFixture, oneLine, snapshot, type Fixture } from './helpers/robust.js';
import { writeNpy, readNpy } from '../lib/data/npy.js';
import { modelBuilder } from '../lib/graph/build.js';
import { saveModel } from '../lib/graph/io.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { fail } from '../lib/cli/common.js';

const BIN = path.resolve(import.meta.dirname, '../bin/offramp.js');
let f: Fixture, p: (name: string) => string;

beforeAll(async () => {
  f = await makeFixture('errors');
  p = (name) => path.join(f.dir, name);
  fs.mkdirSync(p('a-folder'));
  fs.symlinkSync('loop-b', p('loop-a'));
  fs.symlinkSync('loop-a', p('loop-b'));
  // manifests broken in the ways a hand edit or a truncated copy breaks them
  const m = JSON.parse(fs.readFileSync(path.join(f.split, 'manifest.json'), 'utf8'));
  const variant = (name: string, edit: (j: Record<string, unknown> & { stages: Record<string, unknown>[] }) => void) => {
    fs.cpSync(f.split, p(name), { recursive: true });
    const j = structuredClone(m); edit(j);
    fs.writeFileSync(p(`${name}/manifest.json`), JSON.stringify(j));
  };
  variant('no-stages', (j) => { delete (j as Record<string, unknown>).stages; });
  variant('stages-object', (j) => { (j as Record<string, unknown>).stages = { 0: j.stages[0] }; });
  variant('index-minus-1', (j) => { j.stages[1].index = -1; });
  variant('file-outside', (j) => { j.stages[0].file = '../model.onnx'; });
  fs.writeFileSync(p('garbage.bin'), Buffer.from([0x00, 0x01, 0x7b, 0x89, 0xfe, 0x1b, 0x5b, 0x33, 0x31, 0x6d, 0x53, 0x45, 0x43, 0x52, 0x45, 0x54]));
  // a version 2.0 .npy whose u32 header length is near 2^32 (numpy.lib.format: magic, version, u32 length)
  const pre = Buffer.alloc(12); Buffer.from('\x93NUMPY', 'latin1').copy(pre); pre[6] = 2; pre.writeUInt32LE(0xfffffff0, 8);
  fs.writeFileSync(p('v2-huge-header.npy'), Buffer.concat([pre, Buffer.from("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }")]));
  // a declared dim of -3 (ONNX dims are non-negative)
  const b = modelBuilder({ opset: 17, seed: 3 });
  const x = b.input('x', FLOAT, [1, -3, 8, 8]);
  b.output(b.node('Relu', [x]), FLOAT, [1, -3, 8, 8]);
  saveModel(b.build(), p('negative-dim.onnx'));
  const xs = readNpy(f.x).data as Float32Array;
  writeNpy(p('one-row.npy'), xs.slice(0, 1024), [1, 1, 32, 32]);
  writeNpy(p('y-50.npy'), new Int32Array(50), [50]);
}, 60_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

const q = (s: string) => new RegExp(s.replace(/[.*+?^${}()|[\]\\]/g, '\\$&'));

describe('file-system failures name the path', () => {
  test('a folder as --data, --labels or model', async () => {
    oneLine(await cli(['tune', f.split, '--data', p('a-folder')]), 1, q(p('a-folder')), /folder/);
    oneLine(await cli(['replay', f.split, '--data', f.x, '--labels', p('a-folder')]), 1, q(p('a-folder')), /folder/);
    oneLine(await cli(['cost', p('a-folder')]), 1, q(p('a-folder')), /folder/);
  });
  test('a loop of symbolic links as --data or model', async () => {
    oneLine(await cli(['graft', f.model, '--at', '10%', '--data', p('loop-a'), '-o', p('g.onnx')]), 1, q(p('loop-a')), /loop/);
    oneLine(await cli(['tune', f.split, '--data', p('loop-a')]), 1, q(p('loop-a')), /loop/);
    oneLine(await cli(['scan', p('loop-b')]), 1, q(p('loop-b')), /loop/);
  });
  test('-o an existing file for the commands that write a folder', async () => {
    const before = snapshot(f.dir);
    oneLine(await cli(['split', f.grafted, '-o', f.x]), 2, q(f.x), /is a file, not a folder/);
    oneLine(await cli(['build', f.model, '--data', f.x, '-o', f.y]), 2, q(f.y), /is a file, not a folder/);
    oneLine(await cli(['emit-c', f.split, '-o', f.model]), 2, q(f.model), /is a file, not a folder/);
    oneLine(await cli(['emit-c', f.split, '-o', path.join(f.x, 'c')]), 2, /cannot create a folder here/);
    expect(snapshot(f.dir)).toEqual(before);
  });
  test.skipIf(process.getuid?.() === 0)('-o inside a read-only folder', async () => {
    fs.mkdirSync(p('read-only'), { mode: 0o555 });
    oneLine(await cli(['split', f.grafted, '-o', p('read-only/out')]), 1, /permission denied/);
  });
  test('a raw Node error that reaches the CLI is one line with its path, not "internal error"', () => {
    const e = Object.assign(new Error("EACCES: permission denied, open '/some/file'"), { code: 'EACCES', path: '/some/file', syscall: 'open' });
    let err = '';
    const write = process.stderr.write.bind(process.stderr);
    process.stderr.write = ((s: string) => { err += s; return true; }) as typeof process.stderr.write;
    try { expect(fail(e, false)).toBe(1); } finally { process.stderr.write = write; }
    expect(err).toBe('offramp: /some/file: permission denied\n');
  });
});

describe('broken manifests', () => {
  for (const [dir, why] of [['no-stages', /'stages' is missing or not a list/], ['stages-object', /'stages' is missing or not a list/],
    ['index-minus-1', /stages\[1\]: index is -1/], ['file-outside', /not a file name in the manifest's folder/]] as const) {
    test(dir, async () => {
      const manifest = q(path.join(p(dir), 'manifest.json'));
      oneLine(await cli(['tune', p(dir), '--data', f.x]), 1, manifest, why);
      oneLine(await cli(['replay', p(dir), '--data', f.x]), 1, manifest, why);
      oneLine(await cli(['check', p(dir), '--against', f.grafted]), 1, manifest, why);
      oneLine(await cli(['emit-c', p(dir), '-o', p(`${dir}-c`)]), 1, manifest, why);
      expect(fs.existsSync(p(`${dir}-c`))).toBe(false);
    });
  }
});

describe('files that are not what they claim', () => {
  test('--target given a binary file does not print its bytes', async () => {
    const r = await cli(['cost', f.model, '--target', p('garbage.bin')]);
    oneLine(r, 1, q(p('garbage.bin')), /not valid JSON/);
    expect(r.stderr).not.toMatch(/SECRET|\x1b|[\x00-\x08]/);
  });
  test('a .npy v2 header length near 2^32', async () => {
    oneLine(await cli(['tune', f.split, '--data', p('v2-huge-header.npy')]), 1, q(p('v2-huge-header.npy')), /header/);
    oneLine(await cli(['graft', f.model, '--at', '10%', '--data', p('v2-huge-header.npy'), '-o', p('g.onnx')]), 1, q(p('v2-huge-header.npy')));
  });
  test('a negative dim in a model names the model file', async () => {
    for (const cmd of [['cost'], ['scan'], ['split', '--at', '50%', '-o', p('neg-split')]]) {
      const [c, ...rest] = cmd;
      oneLine(await cli([c, p('negative-dim.onnx'), ...rest]), 1, q(p('negative-dim.onnx')), /-3/);
    }
  });
  test('"tuning needs at least 2 samples" names the data file', async () => {
    oneLine(await cli(['tune', f.split, '--data', p('one-row.npy')]), 1, q(p('one-row.npy')), /at least 2 samples/);
  });
  test('a label count that does not match names both files', async () => {
    oneLine(await cli(['replay', f.split, '--data', f.x, '--labels', p('y-50.npy')]), 1, q(p('y-50.npy')), /50 labels for 120 rows of/, q(f.x));
    oneLine(await cli(['tune', f.split, '--data', f.x, '--labels', p('y-50.npy')]), 1, q(p('y-50.npy')), q(f.x));
  });
  test('--debug adds the stack, after the same first line', async () => {
    const plain = await cli(['cost', p('absent.onnx')]);
    const debug = await cli(['--debug', 'cost', p('absent.onnx')]);
    oneLine(plain, 1, q(p('absent.onnx')), /no such file/);
    expect(debug.code).toBe(1);
    expect(debug.stderr.split('\n')[0]).toBe(plain.stderr.trim());
    expect(debug.stderr).toMatch(/\n\s+at .+:\d+:\d+/);
  });
});

// A FIFO would block an open or a read forever: these run as child processes with a time limit, so a
// regression fails here instead of hanging the suite.
describe.skipIf(process.platform === 'win32')('non-regular files', () => {
  const run = (args: string[]) => {
    const r = spawnSync(process.execPath, [BIN, ...args], { encoding: 'utf8', timeout: 20_000 });
    return { code: r.status ?? -1, stderr: r.stderr ?? '' };
  };
  test('a FIFO as model, data, labels, target or policy is refused at once', () => {
    const fifo = p('pipe');
    execFileSync('mkfifo', [fifo]);
    const cases = [
      ['cost', fifo], ['scan', fifo],
      ['graft', f.model, '--at', '10%', '--data', fifo, '-o', p('g.onnx')],
      ['graft', f.model, '--at', '10%', '--data', f.x, '--labels', fifo, '-o', p('g.onnx')],
      ['tune', f.split, '--data', fifo],
      ['replay', f.split, '--data', f.x, '--policy', fifo],
      ['cost', f.model, '--target', fifo],
      ['check', f.split, '--against', fifo],
    ];
    for (const args of cases) oneLine(run(args), 1, q(fifo), /FIFO/);
  });
});

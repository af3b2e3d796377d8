// build and split keep their output folder whole at every instant (issue 11, group 2): stopped
// with SIGKILL before any one of their file changes, the folder holds the old result or the new
// one, and passes the consistency check (manifest ↔ files' SHA-256 ↔ reports); SIGINT/SIGTERM
// clean up scratch, temp and lock files; a live writer's lock is refused, a dead one's taken over.
// The stops are made exact by a preloaded module (helpers/kill-at.mjs), not by timing.
import { describe, it, expect, beforeAll, vi } from 'vitest';
import { spawn, spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { pathToFileURL } from 'node:url';
import { mulberry32 } from '../lib/graph/build.js';
import { tinyMlp } from './helpers/nets.js';
import { saveModel } from '../lib/graph/io.js';
import { writeNpy } from '../lib/data/npy.js';
import { folderProblems, manifestSha, snapshot } from './helpers/folder-check.js';
import { lockFolder } from '../lib/util/folder.js';

const BIN = path.resolve(import.meta.dirname, '../bin/offramp.js');
const KILL = pathToFileURL(path.resolve(import.meta.dirname, 'helpers/kill-at.mjs')).href;
let tmp: string, model: string, data: string;

function run(args: string[], env: Record<string, string> = {}) {
  const r = spawnSync(process.execPath, ['--import', KILL, BIN, ...args], { encoding: 'utf8', env: { ...process.env, NO_COLOR: '1', ...env } });
  return { code: r.status, signal: r.signal, stdout: r.stdout, stderr: r.stderr };
}

/** `k` distinct entries of `from`, chosen by a seeded generator. */
function pick<T>(from: T[], k: number, seed: number): T[] {
  const rnd = mulberry32(seed), pool = [...from], out: T[] = [];
  while (out.length < k && pool.length) out.push(pool.splice(Math.floor(rnd() * pool.length), 1)[0]);
  return out;
}

/** Leftovers of writers of `dir` beside it: scratch folders and lock files. */
const beside = (dir: string) => fs.readdirSync(path.dirname(dir)).filter((f) => f.startsWith(`${path.basename(dir)}.`));
const temps = (dir: string) => snapshot(dir).map(([f]) => f).filter((f) => f.endsWith('.tmp'));

function reset(dir: string, from: string): void {
  for (const f of beside(dir)) fs.rmSync(path.join(path.dirname(dir), f), { recursive: true, force: true });
  fs.rmSync(dir, { recursive: true, force: true });
  fs.cpSync(from, dir, { recursive: true });
}

beforeAll(() => {
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-whole-'));
  model = path.join(tmp, 'mlp.onnx');
  saveModel(tinyMlp(), model);
  const r = mulberry32(3);
  data = path.join(tmp, 'x.npy');
  writeNpy(data, Float32Array.from({ length: 32 * 16 }, () => r() * 2 - 1), [32, 16]);
});

/**
 * The property: from a folder holding `base`'s result, `variant` is stopped before its k-th
 * file change for seeded k; every time, the folder is whole and holds the old or the new result.
 * Then the variant runs to the end over the leftovers of the last stop (a dead writer's lock and
 * scratch) and gives exactly the folder an unstopped run gives.
 */
interface Prepared { first: string; dir: string; done: string; log: string[]; oldSha: string; newSha: string }
const prepared = new Map<string, Prepared>();

/**
 * `first`: `base`'s result; `dir`: where `variant` runs over a copy of it; `done`: the variant's
 * unstopped result; `log`: the variant's file changes, in order. Made once per name.
 */
function prepare(name: string, base: (out: string) => string[], variant: (out: string) => string[]): Prepared {
  const had = prepared.get(name);
  if (had) return had;
  const root = path.join(tmp, name);
  fs.mkdirSync(root);
  const first = path.join(root, 'first'), dir = path.join(root, 'out'), done = path.join(root, 'done');
  expect(run(base(first)).code).toBe(0);
  expect(folderProblems(first)).toEqual([]);
  const logFile = path.join(root, 'log');
  reset(dir, first);
  expect(run(variant(dir), { OFFRAMP_TEST_LOG: logFile }).code).toBe(0);
  expect(folderProblems(dir)).toEqual([]);
  fs.cpSync(dir, done, { recursive: true });
  const p = { first, dir, done, log: fs.readFileSync(logFile, 'utf8').trimEnd().split('\n'), oldSha: manifestSha(first), newSha: manifestSha(dir) };
  expect(p.newSha).not.toBe(p.oldSha);
  prepared.set(name, p);
  return p;
}

function killProperty(p: Prepared, variant: (out: string) => string[], points: (log: string[], dir: string) => number[]) {
  const { first, dir, done, log, oldSha, newSha } = p;
  const stops = points(log, dir);
  expect(stops.length).toBeGreaterThanOrEqual(6);
  for (const k of stops) {
    reset(dir, first);
    const r = run(variant(dir), { OFFRAMP_TEST_KILL_AT: String(k) });
    expect(r.signal, `stop before change ${k}: ${log[k - 1]}`).toBe('SIGKILL');
    expect(folderProblems(dir), `stop before change ${k}: ${log[k - 1]}`).toEqual([]);
    expect([oldSha, newSha], `stop before change ${k}: ${log[k - 1]}`).toContain(manifestSha(dir));
  }
  const r = run(variant(dir));
  expect(r.stderr).toBe('');
  expect(r.code).toBe(0);
  expect(snapshot(dir)).toEqual(snapshot(done));
  expect(beside(dir)).toEqual([]);
}

const build = (extra: string[]) => (out: string) => ['build', model, '--data', data, '--max-drop', '100', '--candidates', '3', '-o', out, ...extra];
const buildBase = build(['--seed', '1']), buildVariant = build(['--seed', '2', '--max-exits', '1']);

describe('a folder stopped mid-way stays whole (seeded stop points)', () => {
  it('build', () => {
    // Mostly the changes inside DIR (the commit), one anywhere (the scratch phase, the lock).
    killProperty(prepare('build', buildBase, buildVariant), buildVariant, (log, dir) => {
      const all = log.map((_, i) => i + 1);
      const inDir = all.filter((k) => log[k - 1].split(' ').slice(1).some((p) => p.startsWith(dir + path.sep)));
      const inside = pick(inDir, 5, 11);
      return [...inside, ...pick(all.filter((k) => !inside.includes(k)), 1, 12)];
    });
  });

  it('build --int8 (DIR/int8 moves with its build)', () => {
    const b8 = (extra: string[]) => build(['--int8', '--target', 'm4f', ...extra]);
    const base = b8(['--seed', '1']), variant = b8(['--seed', '2', '--max-exits', '1']);
    killProperty(prepare('build8', base, variant), variant, (log, dir) => {
      const all = log.map((_, i) => i + 1);
      const inInt8 = all.filter((k) => log[k - 1].split(' ').slice(1).some((p) => p.startsWith(path.join(dir, 'int8') + path.sep)));
      const inDir = all.filter((k) => !inInt8.includes(k) && log[k - 1].split(' ').slice(1).some((p) => p.startsWith(dir + path.sep)));
      // every change inside DIR/int8 (its manifest comes and goes with the firmware that describes it)
      return [...inInt8, ...pick(inDir, 3, 32)];
    });
  });

  it('quantize (QDIR changes as a split folder does)', () => {
    const split = (at: string) => path.join(tmp, `q-split-${at.replace(/\W/g, '')}`);
    for (const at of ['30%', '60%']) expect(run(['split', model, '--at', at, '-o', split(at)]).code).toBe(0);
    const q = (at: string) => (out: string) => ['quantize', split(at), '--data', data, '-o', out];
    killProperty(prepare('quantize', q('30%'), q('60%')), q('60%'), (log) => pick(log.map((_, i) => i + 1), 6, 41));
  });

  it('split', () => {
    const split = (at: string) => (out: string) => ['split', model, '--at', at, '-o', out];
    killProperty(prepare('split', split('20%,50%,80%'), split('40%')), split('40%'), (log) => pick(log.map((_, i) => i + 1), 6, 21));
  });
});

describe('split into a build folder', () => {
  it('removes the reports and firmware code of the manifest it replaces, keeps files it does not own', () => {
    const { done } = prepare('build', buildBase, buildVariant);
    const dir = path.join(tmp, 'resplit');
    fs.cpSync(done, dir, { recursive: true });
    fs.writeFileSync(path.join(dir, 'notes.txt'), 'mine');
    const grafted = fs.readdirSync(dir).find((f) => f.startsWith('model.'))!;
    // The build's own grafted model, split again into its folder: the source stays.
    expect(run(['split', path.join(dir, grafted), '-o', dir]).code).toBe(0);
    expect(folderProblems(dir)).toEqual([]);
    const left = snapshot(dir).map(([f]) => f);
    for (const f of ['report.json', 'report.html', 'firmware/offramp_policy.h', 'firmware/offramp_policy.c']) expect(left).not.toContain(f);
    expect(left).toContain('notes.txt');
    expect(left).toContain(grafted);
  });
});

describe('a build folder with DIR/int8, written again without --int8', () => {
  it('loses its int8 manifest (it describes the manifest replaced) and the int8 stage files', () => {
    const b8 = (extra: string[]) => build(['--int8', '--target', 'm4f', ...extra]);
    const { done } = prepare('build8', b8(['--seed', '1']), b8(['--seed', '2', '--max-exits', '1']));
    const dir = path.join(tmp, 'unint8');
    fs.cpSync(done, dir, { recursive: true });
    expect(run(buildBase(dir)).code).toBe(0);
    expect(folderProblems(dir)).toEqual([]);
    expect(fs.existsSync(path.join(dir, 'int8'))).toBe(false);
    expect(fs.readFileSync(path.join(dir, 'firmware/offramp_policy.c'), 'utf8')).toContain(manifestSha(dir));
  });
});

describe('SIGINT and SIGTERM', () => {
  it('build: stopped while building, DIR is as it was and no scratch, temp or lock file is left; stopped while committing, the commit completes first', () => {
    const { first, dir, log, newSha } = prepare('build', buildBase, buildVariant);
    const inScratch = log.findIndex((l) => l.includes(`${dir}.partial-`) && l.startsWith('renameSync')) + 1;
    const manifestIn = log.findIndex((l) => l.startsWith('renameSync') && l.endsWith(path.join(dir, 'manifest.json'))) + 1;
    expect(inScratch).toBeGreaterThan(0);
    expect(manifestIn).toBeGreaterThan(inScratch);

    for (const signal of ['SIGINT', 'SIGTERM']) {
      reset(dir, first);
      const before = snapshot(dir);
      const r = run(buildVariant(dir), { OFFRAMP_TEST_KILL_AT: String(inScratch), OFFRAMP_TEST_SIGNAL: signal });
      expect(r.signal).toBe(signal);
      expect(snapshot(dir)).toEqual(before);
      expect(beside(dir)).toEqual([]);
      expect(temps(dir)).toEqual([]);
    }
    reset(dir, first);
    const r = run(buildVariant(dir), { OFFRAMP_TEST_KILL_AT: String(manifestIn - 1), OFFRAMP_TEST_SIGNAL: 'SIGINT' });
    expect(r.signal).toBe('SIGINT');
    expect(folderProblems(dir)).toEqual([]);
    expect(manifestSha(dir)).toBe(newSha);
    expect(beside(dir)).toEqual([]);
  });
});

describe('one writer per folder', () => {
  const deadPid = () => spawnSync(process.execPath, ['-e', '']).pid!;

  it('refuses while a live process holds the lock, takes over the lock of a dead one, clears dead writers\' scratch', () => {
    const dir = path.join(tmp, 'locked');
    expect(run(['split', model, '--at', '50%', '-o', dir]).code).toBe(0);
    const before = snapshot(dir);
    // A live holder: this test's own process.
    fs.writeFileSync(`${dir}.lock`, `${process.pid}\n`);
    const r = run(['split', model, '--at', '30%', '-o', dir]);
    expect(r.code).toBe(1);
    expect(r.stderr).toBe(`offramp: ${dir}: another offramp (pid ${process.pid}) is writing this folder; run again when it has finished\n`);
    expect(snapshot(dir)).toEqual(before);
    expect(fs.readFileSync(`${dir}.lock`, 'utf8')).toBe(`${process.pid}\n`);
    // build takes the lock before any work: refused at once, DIR untouched, no scratch made.
    const b = run(['build', model, '--data', data, '--max-drop', '100', '-o', dir]);
    expect(b.code).toBe(1);
    expect(b.stderr).toMatch(/is writing this folder/);
    expect(snapshot(dir)).toEqual(before);
    expect(beside(dir)).toEqual([`${path.basename(dir)}.lock`]);

    const dead = deadPid();
    fs.writeFileSync(`${dir}.lock`, `${dead}\n`);
    fs.mkdirSync(`${dir}.partial-${dead}`);
    fs.writeFileSync(path.join(`${dir}.partial-${dead}`, 'manifest.json'), '{}');
    fs.writeFileSync(path.join(dir, `.stage-0.onnx.${dead}.1700000000000.tmp`), 'half');
    fs.mkdirSync(`${dir}.partial-${process.pid}`); // a live writer's scratch stays
    expect(run(['split', model, '--at', '30%', '-o', dir]).code).toBe(0);
    expect(folderProblems(dir)).toEqual([]);
    expect(beside(dir)).toEqual([`${path.basename(dir)}.partial-${process.pid}`]);
    expect(temps(dir)).toEqual([]);
  });

  it('where the file system has no hard links (FAT): O_EXCL with the pid inside; an empty lock is held while fresh', () => {
    const spy = vi.spyOn(fs, 'linkSync').mockImplementation(() => { throw Object.assign(new Error('operation not permitted'), { code: 'EPERM' }); });
    try {
      const dir = path.join(tmp, 'fat');
      const held = lockFolder(dir);
      expect(fs.readFileSync(`${dir}.lock`, 'utf8')).toBe(`${process.pid}\n`);
      expect(() => lockFolder(dir)).toThrow(`another offramp (pid ${process.pid}) is writing this folder`);
      held.release();
      expect(fs.existsSync(`${dir}.lock`)).toBe(false);
      // A writer between its O_EXCL open and writing its pid.
      fs.writeFileSync(`${dir}.lock`, '');
      expect(() => lockFolder(dir)).toThrow('another offramp is writing this folder');
      // Empty for a minute: its writer died there.
      const old = new Date(Date.now() - 60_000);
      fs.utimesSync(`${dir}.lock`, old, old);
      lockFolder(dir).release();
      expect(fs.readdirSync(tmp).filter((f) => f.startsWith('fat.'))).toEqual([]);
    } finally { spy.mockRestore(); }
  });

  it('two splits into one folder at once: each finishes or is refused, never interleaved', async () => {
    const dir = path.join(tmp, 'race');
    const go = (at: string) => new Promise<{ code: number | null; stderr: string }>((resolve) => {
      const p = spawn(process.execPath, [BIN, 'split', model, '--at', at, '-o', dir], { stdio: ['ignore', 'ignore', 'pipe'] });
      let stderr = '';
      p.stderr.on('data', (d) => { stderr += d; });
      p.on('close', (code) => resolve({ code, stderr }));
    });
    for (let round = 0; round < 3; round++) {
      const rs = await Promise.all([go('25%,50%,75%'), go('40%')]);
      expect(rs.some((r) => r.code === 0)).toBe(true);
      for (const r of rs) if (r.code !== 0) { expect(r.code).toBe(1); expect(r.stderr).toMatch(/is writing this folder/); }
      expect(folderProblems(dir)).toEqual([]);
      const m = JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8'));
      expect(fs.readdirSync(dir).filter((f) => f.endsWith('.onnx')).sort()).toEqual(m.stages.map((s: { file: string }) => s.file).sort());
      expect(beside(dir)).toEqual([]);
    }
  });
});

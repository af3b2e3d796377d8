// Issue 16, "files destroyed or overwritten": each case the exact command, its exit code, one line
// naming the file or option, and every input hashed before and after. Before the fixes, `quantize DIR
// -o LINK-TO-DIR` and `quantize DIR/int8 -o DIR` destroyed the input split, a data file named like a
// stage file was swept away, `tune --report` overwrote --unlabelled and --segments, a stream tune that
// certified nothing replaced a certified policy, and emit-c/replay on a build --int8 folder took the
// float chain.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { cli, makeFixture, oneLine, snapshot, sha, ROWS, type Fixture } from './helpers/robust.js';
import { writeNpy } from '../lib/data/npy.js';
import { mulberry32 } from '../lib/graph/build.js';
import { saveModel } from '../lib/graph/io.js';
import { tinyMlp } from './helpers/nets.js';
import { folderProblems } from './helpers/folder-check.js';
import { quantizeSplit } from '../lib/quant/split.js';
import type { Manifest } from '../lib/split/manifest.js';
import { BINS, FRAMES } from '../scripts/demo-data.js';

let f: Fixture, p: (name: string) => string;
const manifestOf = (dir: string) => JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8')) as Manifest;

beforeAll(async () => {
  f = await makeFixture('kept');
  p = (name) => path.join(f.dir, name);
  fs.symlinkSync('split', p('split-link'));
  writeNpy(p('u.npy'), new Float32Array(20 * BINS * FRAMES).fill(0.5), [20, 1, BINS, FRAMES]);
  writeNpy(p('seg.npy'), Int32Array.from({ length: ROWS }, (_, i) => Math.floor(i / 10)), [ROWS]);
}, 120_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

describe('quantize never writes over the split it reads', () => {
  test('quantize DIR -o a symbolic link to DIR: refused, the split as it was', async () => {
    const before = snapshot(f.dir);
    const r = await cli(['quantize', f.split, '--data', f.x, '-o', p('split-link')]);
    oneLine(r, 2, /refusing to write over an input/, /manifest|stage file/);
    expect(snapshot(f.dir)).toEqual(before);
  });

  test('quantize DIR/int8 -o DIR (the output folder nests the input as its int8/): refused, nothing removed', async () => {
    const outer = p('outer');
    fs.mkdirSync(outer);
    // a float split living where a build keeps its int8 chain
    expect((await cli(['split', f.grafted, '-o', path.join(outer, 'int8')])).code).toBe(0);
    const before = snapshot(f.dir);
    const r = await cli(['quantize', path.join(outer, 'int8'), '--data', f.x, '-o', outer]);
    oneLine(r, 2, /refusing to write over an input/);
    expect(snapshot(f.dir)).toEqual(before);
  });

  test('a data file named like a stage file in QDIR: the CLI refuses it; the library keeps it through the sweep', async () => {
    const q = p('q-data');
    fs.mkdirSync(q);
    const data = path.join(q, 'stage-7.0123456789abcdef.onnx');
    fs.copyFileSync(f.x, data);
    const hash = sha(data);
    oneLine(await cli(['quantize', f.split, '--data', data, '-o', q]), 2, /refusing to write over an input \(data/);
    expect(sha(data)).toBe(hash);
    // the library, which has no such guard, quantizes beside it, twice, and the data stays
    await quantizeSplit(f.split, { data, out: q });
    await quantizeSplit(f.split, { data, out: q, calibration: 'mse' });
    expect(sha(data)).toBe(hash);
    expect(folderProblems(q)).toEqual([]);

    const q2 = p('q-data2');
    fs.mkdirSync(q2);
    fs.copyFileSync(f.x, path.join(q2, 'manifest.json'));
    const before = snapshot(q2);
    oneLine(await cli(['quantize', f.split, '--data', path.join(q2, 'manifest.json'), '-o', q2]), 2, /refusing to write over an input \(data/);
    expect(snapshot(q2)).toEqual(before);
  });

  test('the library refuses the same folders as the CLI, by identity', async () => {
    await expect(quantizeSplit(f.split, { data: f.x, out: p('split-link') })).rejects.toThrow(/refusing to write over an input/);
    await expect(quantizeSplit(path.join(p('outer'), 'int8'), { data: f.x, out: p('outer') })).rejects.toThrow(/refusing to write over an input/);
  });
});

describe('a sweep removes only what offramp wrote', () => {
  test('split over a folder holding a user file named like a stage file: the file stays; stage files of the earlier split go', async () => {
    const dir = p('sweep');
    expect((await cli(['split', f.grafted, '--at', '30%', '-o', dir])).code).toBe(0);
    const earlier = manifestOf(dir).stages.map((s) => s.file);
    const mine = path.join(dir, 'stage-3.0123456789abcdef.onnx'), plain = path.join(dir, 'stage-9.onnx');
    fs.copyFileSync(f.model, mine);
    fs.copyFileSync(f.model, plain);
    const r = await cli(['split', f.grafted, '--at', '60%', '-o', dir]);
    expect(r.code, r.stderr).toBe(0);
    expect(sha(mine)).toBe(sha(f.model));
    expect(sha(plain)).toBe(sha(f.model));
    const now = new Set(manifestOf(dir).stages.map((s) => s.file));
    for (const e of earlier) if (!now.has(e)) expect(fs.existsSync(path.join(dir, e)), e).toBe(false);
    expect(folderProblems(dir)).toEqual([]);
  });
});

describe('tune --report never writes over what tune reads', () => {
  test('--report the --unlabelled file', async () => {
    const before = snapshot(f.dir);
    oneLine(await cli(['tune', f.split, '--data', f.x, '--unlabelled', p('u.npy'), '--no-write', '--report', p('u.npy')]), 2, /refusing to write over an input \(unlabelled data/);
    expect(snapshot(f.dir)).toEqual(before);
  });
  test('--report the --segments file', async () => {
    const before = snapshot(f.dir);
    oneLine(await cli(['tune', f.split, '--data', f.x, '--stream', '--segments', p('seg.npy'), '--no-write', '--report', p('seg.npy')]), 2, /refusing to write over an input \(segments/);
    expect(snapshot(f.dir)).toEqual(before);
  });
});

describe('a tuning that certifies nothing does not replace a certified policy', () => {
  test('stream tune over a certified per-frame policy: the manifest kept, and said so; --replace writes it', async () => {
    const dir = p('certified');
    fs.cpSync(f.split, dir, { recursive: true });
    // The per-frame policy a larger tuning certified (120 rows certify nothing at 1 pp: the guarantee is set by hand).
    const m = manifestOf(dir);
    const rule = { kind: 'confidence', thresholds: [0.9, 0.8] };
    const g = { ...m.policy!.guarantee!, certified: true, maxDrop: 1, confidence: 0.95 };
    fs.writeFileSync(path.join(dir, 'manifest.json'), JSON.stringify({ ...m, policy: { ...m.policy, rule, guarantee: g } }, null, 2) + '\n');
    const before = snapshot(dir);
    const r = await cli(['tune', dir, '--data', f.x, '--stream']);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/^promise    no promise: /m);
    expect(r.stdout).toMatch(/^manifest   manifest not changed: .*manifest\.json keeps its certified confidence policy .* add --replace/m);
    expect(r.stdout).not.toMatch(/^written /m);
    expect(snapshot(dir)).toEqual(before);
    const j = JSON.parse((await cli(['tune', dir, '--data', f.x, '--stream', '--json'])).stdout);
    expect(j.written).toBeNull();
    expect(j.manifestNote).toMatch(/manifest not changed/);

    const w = await cli(['tune', dir, '--data', f.x, '--stream', '--replace']);
    expect(w.code, w.stderr).toBe(0);
    expect(w.stdout).toMatch(/^written    .*manifest\.json\n {11}replaced the certified confidence policy/m);
    // 120 frames certify nothing: what replaced it is the full model, and the output says what that means
    expect(w.stdout).toMatch(/the manifest's policy is now the full model: firmware emitted from it never exits early/);
    expect(manifestOf(dir).policy!.rule).not.toEqual(rule);
  }, 120_000);
});

describe('on a build --int8 folder the deployed chain is the int8 one', () => {
  let build: string, x: string;
  beforeAll(async () => {
    const model = p('mlp.onnx');
    saveModel(tinyMlp(), model);
    const r = mulberry32(3);
    x = p('mlp-x.npy');
    writeNpy(x, Float32Array.from({ length: 48 * 16 }, () => r() * 2 - 1), [48, 16]);
    build = p('b8');
    const b = await cli(['build', model, '--data', x, '--candidates', '3', '--target', 'm4f', '--int8', '--max-drop', '100', '-o', build]);
    expect(b.code, b.stderr).toBe(0);
  }, 120_000);

  test('emit-c DIR -o DIR/firmware rewrites the int8 firmware, not float firmware; --float chooses the float chain', async () => {
    const fw = path.join(build, 'firmware');
    const before = snapshot(fw);
    const r = await cli(['emit-c', build, '-o', fw]);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout.split('\n')[0]).toMatch(/^chain: .*int8\/manifest\.json \(int8, the chain this build deploys; --float for the float chain\)$/);
    // the same chain and policy as the build wrote: the same bytes
    expect(snapshot(fw)).toEqual(before);
    expect(folderProblems(build)).toEqual([]);
    const other = p('fw-float');
    const fl = await cli(['emit-c', build, '--float', '-o', other]);
    expect(fl.code, fl.stderr).toBe(0);
    expect(fl.stdout.split('\n')[0]).toMatch(/^chain: .*b8\/manifest\.json \(float, --float; the build deploys .*int8\/manifest\.json\)$/);
    expect(fs.readFileSync(path.join(other, 'offramp_policy.c'), 'utf8')).not.toBe(fs.readFileSync(path.join(fw, 'offramp_policy.c'), 'utf8'));
  });

  test('a C file of offramp\'s names that offramp did not write is never replaced or removed: emit-c and build refuse, exit 2', async () => {
    // a user's own file where emit-c would write its policy code
    const out = p('own-c');
    fs.mkdirSync(out);
    fs.writeFileSync(path.join(out, 'offramp_policy.c'), 'int my_policy(void) { return 1; }\n');
    const before = snapshot(out);
    oneLine(await cli(['emit-c', build, '--float', '-o', out]), 2, path.join(out, 'offramp_policy.c'), /not a file offramp wrote/);
    expect(snapshot(out)).toEqual(before);
    // emit-c over its own earlier output is fine (every file it writes opens with its name)
    const again = p('own-c-2');
    expect((await cli(['emit-c', build, '--float', '-o', again])).code).toBe(0);
    expect((await cli(['emit-c', build, '--float', '-o', again])).code).toBe(0);
    // in a build's firmware folder: the build refuses before it starts, and the file stays
    const mine = path.join(build, 'firmware', 'offramp_mine.c');
    fs.writeFileSync(mine, 'int mine;\n');
    const manifest = fs.readFileSync(path.join(build, 'manifest.json'));
    oneLine(await cli(['build', p('mlp.onnx'), '--data', x, '--candidates', '3', '--target', 'm4f', '--int8', '--max-drop', '100', '-o', build]), 2, mine, /not a file offramp wrote/);
    expect(fs.readFileSync(mine, 'utf8')).toBe('int mine;\n');
    expect(fs.readFileSync(path.join(build, 'manifest.json'))).toEqual(manifest);
    fs.rmSync(mine);
  });

  test('replay and check say which chain they used in their first line', async () => {
    const r = await cli(['replay', build, '--data', x]);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout.split('\n')[0]).toMatch(/^chain: .*int8\/manifest\.json \(int8/);
    expect(r.stdout).toContain(JSON.stringify(manifestOf(path.join(build, 'int8')).policy!.rule));
    const c = await cli(['check', build, '--against', p('mlp.onnx'), '--data', x]);
    expect(c.code, c.stderr).toBe(0);
    expect(c.stdout.split('\n')[0]).toMatch(/^chain: .*int8\/manifest\.json \(int8/);
    // every row of --data, not the 4 random samples' default
    expect(c.stdout.split('\n')[1]).toMatch(/^48 samples \(from data\), int8 chain/);
    const cf = await cli(['check', build, '--float', '--against', p('mlp.onnx'), '--data', x, '--samples', '5']);
    expect(cf.code, cf.stderr).toBe(0);
    expect(cf.stdout.split('\n')[0]).toMatch(/^chain: .*b8\/manifest\.json \(float, --float/);
    expect(cf.stdout.split('\n')[1]).toMatch(/^5 samples \(from data\), float rtol/);
  });

  test('cost DIR costs the deployed int8 stage files (no longer "is a folder"); --float the float ones', async () => {
    const q = manifestOf(path.join(build, 'int8')), fl = manifestOf(build);
    const r = await cli(['cost', build, '--target', 'm4f']);
    expect(r.code, r.stderr).toBe(0);
    const lines = r.stdout.split('\n');
    expect(lines[0]).toMatch(/^chain: .*int8\/manifest\.json \(int8, the chain this build deploys/);
    for (const s of q.stages) expect(r.stdout).toContain(s.file);
    // the arena as the quantized split recorded it for each stage file (its own plan, lib/split/manifest.ts fileArena)
    const j = JSON.parse((await cli(['cost', path.join(build, 'int8'), '--json'])).stdout);
    expect(j.chain.precision).toBe('int8');
    expect(j.stages.map((s: { arenaBytes: number }) => s.arenaBytes)).toEqual(q.stages.map((s) => s.arenaBytes));
    const f8 = await cli(['cost', build, '--float']);
    expect(f8.stdout.split('\n')[0]).toMatch(/^chain: .*b8\/manifest\.json \(float, --float/);
    for (const s of fl.stages) expect(f8.stdout).toContain(s.file);
    oneLine(await cli(['cost', build, '--cuts', 'x']), 2, /--cuts applies to a model file/);
  });
});

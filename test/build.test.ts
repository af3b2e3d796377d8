// End to end on the invented demo scenario: offramp build from the committed model
// and generated data to a folder, judged against a target.
import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { C_FILES } from '../lib/emit/c.js';

const MODEL = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
let dir: string, x: string, y: string;
const files = (d: string): string[][] => fs.readdirSync(d).sort().flatMap((f) => {
  const p = path.join(d, f);
  return fs.statSync(p).isDirectory() ? files(p).map(([g, b]) => [`${f}/${g}`, b]) : [[f, fs.readFileSync(p).toString('base64')]];
});

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-build-'));
  const s = samples(600, 77);
  x = path.join(dir, 'x.npy'); y = path.join(dir, 'y.npy');
  writeNpy(x, s.x, [600, 1, BINS, FRAMES]);
  writeNpy(y, s.y, [600]);
});

describe('offramp build', () => {
  it('places exits, tunes a policy within the accuracy bound and saves MACs; the folder is complete', () => {
    const out = path.join(dir, 'a');
    // 150 certifying rows (odd rows, half of them) support a promise of a few points, not of one
    const r = offramp(['build', MODEL, '--data', x, '--labels', y, '--max-drop', '5', '--target', 'm4f', '-o', out, '--json']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.schema).toBe('offramp-build/3');
    expect(j.exits.length).toBeGreaterThan(0);
    expect(j.guarantee.certified).toBe(true);
    expect(j.guarantee.bound).toBeLessThanOrEqual(5);
    expect(j.guarantee.evidence).toBe(j.heldOut.samples);
    expect(j.heldOut.dropPoints).toBeCloseTo(j.guarantee.estimate, 9);
    expect(j.heldOut.meanMacs).toBeLessThan(j.heldOut.fullMacs);
    expect(j.check.ok).toBe(true);
    expect(j.budget.fits).toBe(true);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'manifest.json'), 'utf8'));
    expect(m.policy.rule.kind).toBe(j.policy.kind);
    expect(m.policy.guarantee).toEqual(j.guarantee);
    expect(m.stages).toHaveLength(j.exits.length + 1);
    for (const s of m.stages) expect(fs.existsSync(path.join(out, s.file))).toBe(true);
    for (const f of ['report.html', 'firmware/offramp_policy.h', 'firmware/offramp_policy.c']) expect(fs.existsSync(path.join(out, f))).toBe(true);
    // the firmware folder is the whole C library: generated tables and the fixed decision code
    expect(fs.readdirSync(path.join(out, 'firmware')).sort()).toEqual([...C_FILES].sort());
    // The exit shares add up to every held-out sample.
    expect(j.heldOut.exitShare.reduce((a: number, b: number) => a + b, 0)).toBeCloseTo(1, 9);
    expect(JSON.parse(fs.readFileSync(path.join(out, 'report.json'), 'utf8'))).toEqual(j);
  });
  it('prints what a person reads first: the result, the promise in one sentence, the next command, on one screen', () => {
    const out = path.join(dir, 't');
    const r = offramp(['build', MODEL, '--data', x, '--labels', y, '--max-drop', '5', '--target', 'm4f', '-o', out]);
    expect(r.code, r.stderr).toBe(0);
    const lines = r.stdout.trimEnd().split('\n');
    expect(lines.length).toBeLessThanOrEqual(25);
    expect(lines[0]).toMatch(/^built      .*: \d+ exits? .*\d+ stages; the stages compute what the grafted model does/);
    expect(lines[1]).toMatch(/^chosen     .*MACs per sample on average instead of .*, \d+\.\d % saved$/);
    expect(r.stdout).toMatch(/^promise    on new data like this, accuracy drops by at most 5 points against the full model, with 95 % confidence \(certified on \d+ samples: bound \d+\.\d\d points\)$/m);
    expect(r.stdout).toMatch(new RegExp(`^next       offramp replay ${out.replace(/[.*+?^${}()|[\]\\]/g, '\\$&')} --data `, 'm'));
    // one name for the final output, and no conventions block by default
    expect(r.stdout).toMatch(/ final /);
    expect(r.stdout).not.toMatch(/\(final\)|figures    weights/);
    const v = offramp(['build', MODEL, '--data', x, '--labels', y, '--max-drop', '5', '--target', 'm4f', '-o', path.join(dir, 'tv'), '--verbose']);
    expect(v.stdout).toMatch(/^figures    weights: bytes as stored/m);
    expect(v.stdout).toMatch(/fixed-sequence testing over \d+ front settings/);
    // a tuning of the folder says which of its files still describe the manifest before it, and what to run
    // on rows the heads were not fitted on (build fits them on the even rows of --data)
    const fresh = samples(600, 78), x2 = path.join(dir, 'x2.npy'), y2 = path.join(dir, 'y2.npy');
    writeNpy(x2, fresh.x, [600, 1, BINS, FRAMES]);
    writeNpy(y2, fresh.y, [600]);
    const t = offramp(['tune', out, '--data', x2, '--labels', y2, '--max-drop', '5']);
    expect(t.code, t.stderr).toBe(0);
    const esc = (p: string) => p.replace(/[.*+?^${}()|[\]\\]/g, '\\$&');
    expect(t.stdout).toMatch(new RegExp(`^written    ${esc(path.join(out, 'manifest.json'))}; ${esc(path.join(out, 'report.html'))}, ${esc(path.join(out, 'report.json'))}, ${esc(path.join(out, 'firmware'))} still describe the manifest before this tuning$`, 'm'));
  });
  it('gives byte-identical files for the same inputs', () => {
    const a = path.join(dir, 'a'), b = path.join(dir, 'b');
    offramp(['build', MODEL, '--data', x, '--labels', y, '--max-drop', '5', '--target', 'm4f', '-o', b, '--json']);
    // The reports name their folder; everything else must match byte for byte.
    const strip = (d: string) => files(d).filter(([f]) => !f.startsWith('report.'));
    expect(strip(b)).toEqual(strip(a));
  });
  it('exits 3 naming the stage when a stage does not fit, after writing the report', () => {
    const out = path.join(dir, 'small');
    const r = offramp(['build', MODEL, '--data', x, '--labels', y, '--flash', '16K', '--ram', '256K', '--clock-mhz', '64', '--macs-per-cycle', '0.5', '-o', out]);
    expect(r.code).toBe(3);
    expect(r.stderr).toMatch(/over budget: stage \d+.*flash/);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(JSON.parse(fs.readFileSync(path.join(out, 'report.json'), 'utf8')).budget.fits).toBe(false);
  });
  it('leaves the folder as it was when a build fails, and keeps files it does not write', () => {
    const out = path.join(dir, 'keep');
    expect(offramp(['build', MODEL, '--data', x, '--labels', y, '-o', out]).code).toBe(0);
    fs.writeFileSync(path.join(out, 'notes.txt'), 'mine');
    const before = files(out);
    const bad = path.join(dir, 'bad-labels.npy');
    writeNpy(bad, BigInt64Array.from({ length: 600 }, (_, i) => BigInt(i % 7)), [600]); // class 5 and 6 do not exist
    const r = offramp(['build', MODEL, '--data', x, '--labels', bad, '-o', out]);
    expect(r.code).toBe(1);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(files(out)).toEqual(before);
    expect(fs.readdirSync(dir).filter((f) => f.includes('.partial-'))).toEqual([]);
  });
  it('on 32 rows nothing can be certified: the full model is kept and the text says so in one line', () => {
    const tiny = path.join(dir, 'tiny.npy'), tinyY = path.join(dir, 'tiny-y.npy');
    const s = samples(32, 5);
    writeNpy(tiny, s.x, [32, 1, BINS, FRAMES]);
    writeNpy(tinyY, s.y, [32]);
    const r = offramp(['build', MODEL, '--data', tiny, '--labels', tinyY, '-o', path.join(dir, 'tiny')]);
    expect(r.code).toBe(0);
    const lines = r.stdout.split('\n');
    expect(lines.filter((l) => l.startsWith('promise    no promise: '))).toHaveLength(1);
    expect(r.stdout).toMatch(/^chosen     the full model on every sample .*no early exit could be certified$/m);
    const j = JSON.parse(fs.readFileSync(path.join(dir, 'tiny', 'report.json'), 'utf8'));
    expect(j.guarantee.certified).toBe(false);
    expect(j.heldOut.meanMacs).toBe(j.heldOut.fullMacs);
    expect(j.policy.thresholds.every((t: number | null) => t === null)).toBe(true);
  });
  it('refuses bad input with one line', () => {
    for (const c of ['0', '1', 'x']) {
      const bad = offramp(['build', MODEL, '--data', x, '--confidence', c, '-o', path.join(dir, 'bad')]);
      expect(bad.code).toBe(2);
      expect(bad.stderr).toMatch(/--confidence/);
    }
    const r = offramp(['build', MODEL, '--data', y, '-o', path.join(dir, 'bad')]);
    expect(r.code).toBe(1);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toContain(y);
  });
});

describe('offramp build --reorder', () => {
  it('judges the stage files in their memory-aware order, and they still reproduce the model', async () => {
    const { modelBuilder } = await import('../lib/graph/build.js');
    const { saveModel } = await import('../lib/graph/io.js');
    const { mulberry32 } = await import('../lib/graph/build.js');
    // Two blocks of four branches written layer by layer; finishing a branch before the next frees memory.
    const b = modelBuilder({ opset: 17, seed: 11 });
    let x = b.input('x', 1, ['N', 8, 16, 16]);
    for (let blk = 0; blk < 2; blk++) {
      let t = [0, 1, 2, 3].map((i) => b.node('Conv', [x, b.init(`w${blk}${i}`, 1, [8, 8, 3, 3])], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] }));
      t = t.map((v) => b.node('Relu', [v]));
      let y = t[0];
      for (const v of t.slice(1)) y = b.node('Add', [y, v]);
      x = b.node('Relu', [y]);
    }
    b.output(b.node('Flatten', [b.node('GlobalAveragePool', [x])]), 1, ['N', 8]);
    const d = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-build-reorder-'));
    const model = path.join(d, 'branches.onnx');
    saveModel(b.build(), model);
    const rnd = mulberry32(4);
    writeNpy(path.join(d, 'x.npy'), Float32Array.from({ length: 64 * 8 * 16 * 16 }, () => rnd() * 2 - 1), [64, 8, 16, 16]);
    const run = (out: string, extra: string[]) => {
      const r = offramp(['build', model, '--data', path.join(d, 'x.npy'), '--max-drop', '100', '--target', 'm4f', '-o', path.join(d, out), '--json', ...extra]);
      expect(r.stderr).toBe('');
      return JSON.parse(r.stdout);
    };
    const plain = run('plain', []), re = run('re', ['--reorder']);
    const m = JSON.parse(fs.readFileSync(path.join(d, 're', 'manifest.json'), 'utf8'));
    expect(m.stages.some((s: { reorder?: { before: number; after: number } }) => s.reorder && s.reorder.after < s.reorder.before)).toBe(true);
    const ram = (j: { budget: { stages: { stored: { ram: { need: number } } }[] } }) => j.budget.stages.map((s) => s.stored.ram.need);
    ram(re).forEach((need: number, k: number) => expect(need).toBeLessThanOrEqual(ram(plain)[k]));
    expect(ram(re).reduce((a: number, v: number) => a + v, 0)).toBeLessThan(ram(plain).reduce((a: number, v: number) => a + v, 0));
    expect(re.check.ok).toBe(true);
  });
});

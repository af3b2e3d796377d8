// tune and replay through the CLI: the happy path's agreement between them, and bad input.
import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { samples, stream, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { writeManifestPolicy } from '../lib/split/manifest.js';

const MODEL = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
let dir: string, x: string, y: string, short: string, split: string, plain: string;

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-tune-'));
  const s = samples(400, 9);
  x = path.join(dir, 'x.npy'); y = path.join(dir, 'y.npy'); short = path.join(dir, 'short.npy');
  writeNpy(x, s.x, [400, 1, BINS, FRAMES]);
  writeNpy(y, s.y, [400]);
  writeNpy(short, s.y.subarray(0, 10), [10]);
  const grafted = path.join(dir, 'g.onnx');
  expect(offramp(['graft', MODEL, '--at', '10%,70%', '--data', x, '--labels', y, '-o', grafted]).code).toBe(0);
  split = path.join(dir, 'split');
  expect(offramp(['split', grafted, '-o', split]).code).toBe(0);
  plain = path.join(dir, 'plain');
  expect(offramp(['split', MODEL, '--at', '40%', '-o', plain]).code).toBe(0);
});

describe('offramp tune and replay', () => {
  it('replay spends what tune predicted for the same frames', () => {
    // 200 certifying samples support a promise of a few points, not of one (see the next test)
    const t = JSON.parse(offramp(['tune', split, '--data', x, '--labels', y, '--held-out', '0.5', '--max-drop', '5', '--json']).stdout);
    expect(t.schema).toBe('offramp-tune/2');
    expect(t.guarantee.certified).toBe(true);
    expect(t.guarantee.bound).toBeLessThanOrEqual(5);
    const r = offramp(['replay', split, '--data', x, '--labels', y, '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.summary.frames).toBe(400);
    expect(j.summary.meanMacs).toBeLessThan(j.summary.fullMacs);
    // The tuner's figures come from the cache; the replay runs the stage files. Over both parts they must agree.
    const c = t.chosen, n = c.tune.samples + c.held.samples;
    expect(j.summary.meanMacs).toBeCloseTo((c.tune.meanMacs * c.tune.samples + c.held.meanMacs * c.held.samples) / n, 3);
    expect(j.summary.accuracy).toBeCloseTo((c.tune.accuracy * c.tune.samples + c.held.accuracy * c.held.samples) / n, 9);
    const m = JSON.parse(fs.readFileSync(path.join(split, 'manifest.json'), 'utf8'));
    expect(j.policy).toEqual(m.policy.rule);
    expect(m.policy.guarantee).toEqual(t.guarantee);
    // with labels, replay sets the drop it saw beside the promise: the full model's accuracy over both parts
    const fullAcc = (t.full.tune.accuracy * t.full.tune.samples + t.full.held.accuracy * t.full.held.samples) / n;
    expect(j.summary.fullAccuracy).toBeCloseTo(fullAcc, 9);
    expect(j.summary.drop).toBeCloseTo((fullAcc - j.summary.accuracy) * 100, 9);
    expect(j.summary.promise).toEqual({ maxDrop: 5, confidence: 0.95, bound: t.guarantee.bound, kept: j.summary.drop <= 5 });
  });
  it('the text output: result first, the promise in one sentence, on one screen; --verbose adds the fronts', () => {
    const t = offramp(['tune', split, '--data', x, '--labels', y, '--max-drop', '5', '--no-write']);
    expect(t.code, t.stderr).toBe(0);
    const lines = t.stdout.trimEnd().split('\n');
    expect(lines.length).toBeLessThanOrEqual(25);
    expect(lines[0]).toMatch(/^chosen     /);
    expect(t.stdout).toMatch(/^promise    on new data like this, accuracy drops by at most 5 points against the full model, with 95 % confidence \(certified on 200 samples: bound /m);
    expect(t.stdout).toMatch(/^leaves at  exit-0 \d+\.\d %, exit-1 \d+\.\d %, final \d+\.\d %$/m);
    expect(t.stdout).not.toMatch(/^front: /m);
    const v = offramp(['tune', split, '--data', x, '--labels', y, '--max-drop', '5', '--no-write', '--verbose']);
    expect(v.stdout.match(/^front: /gm)).toHaveLength(5);
    // replay of a per-frame policy: no scene columns, the final output named final
    // (the manifest's policy: the first test tuned it per frame at 5 points)
    const r = offramp(['replay', split, '--data', x, '--labels', y]);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout.trimEnd().split('\n').length).toBeLessThanOrEqual(25);
    expect(r.stdout).not.toMatch(/scenes|reused/);
    expect(r.stdout).toMatch(/^leaves at  exit-0 .*, final \d+\.\d\d %$/m);
    expect(r.stdout).toMatch(/^promise    (kept|BROKEN): the tuned policy promises a drop of at most 5 points at 95 % confidence/m);
  });
  it('too few samples for the promise: the full model is kept, said in one line with the samples the next setting would need', () => {
    const r = offramp(['tune', split, '--data', x, '--labels', y, '--max-drop', '1', '--confidence', '0.99', '--no-write']);
    expect(r.code).toBe(0);
    const line = r.stdout.split('\n').filter((l) => l.startsWith('promise    '));
    expect(line).toHaveLength(1);
    expect(line[0]).toMatch(/^promise    no promise: .* so the full model is kept(; about \d+ samples would certify the next setting|; more data would not help .*)?$/);
    expect(r.stdout).toMatch(/^chosen     the full model on every sample .*no early exit could be certified$/m);
    const j = JSON.parse(offramp(['tune', split, '--data', x, '--labels', y, '--max-drop', '1', '--confidence', '0.99', '--no-write', '--json']).stdout);
    expect(j.guarantee.certified).toBe(false);
    expect(j.guarantee.confidence).toBe(0.99);
    expect(j.chosen.policy.thresholds.every((t: number | null) => t === null)).toBe(true);
    // the best observed setting, offered by hand and marked as carrying no promise: the cheapest front point whose
    // observed drop stays within --max-drop, never in the manifest
    const fronts = j.kinds.flatMap((k: { front: { policy: { thresholds: (number | null)[] }; held: { meanMacs: number }; cert?: { estimate: number } }[] }) => k.front)
      .filter((p: { policy: { thresholds: (number | null)[] }; held: { meanMacs: number }; cert?: { estimate: number } }) => p.held.meanMacs < j.full.held.meanMacs && (p.cert?.estimate ?? Infinity) <= 1);
    if (!fronts.length) { expect(j.uncertified).toBeUndefined(); return; }
    const cheapest = Math.min(...fronts.map((p: { held: { meanMacs: number } }) => p.held.meanMacs));
    expect(j.uncertified.certified).toBe(false);
    expect(j.uncertified.observedDropPoints).toBeLessThanOrEqual(1);
    expect(j.uncertified.savingShare).toBeCloseTo(1 - cheapest / j.full.held.meanMacs, 9);
    const hint = r.stdout.split('\n').find((l) => l.startsWith('observed   '))!;
    expect(hint).toMatch(/NOT certified, not written; to try it anyway: --policy '/);
    const json = /--policy '(\{.*\})'$/.exec(hint)![1];
    expect(JSON.parse(json)).toEqual(j.uncertified.policy);
    const rp = offramp(['replay', split, '--data', x, '--policy', json, '--json']);
    expect(rp.code, rp.stderr).toBe(0);
    expect(JSON.parse(rp.stdout).policy).toEqual(j.uncertified.policy);
  });
  it('bad input: one line naming the file, exit 1; usage errors exit 2', () => {
    const noExits = offramp(['tune', plain, '--data', x, '--labels', y]);
    expect(noExits.code).toBe(1);
    expect(noExits.stderr.trim().split('\n')).toHaveLength(1);
    expect(noExits.stderr).toMatch(/exit/);
    const fewLabels = offramp(['tune', split, '--data', x, '--labels', short]);
    expect(fewLabels.code).toBe(1);
    expect(fewLabels.stderr).toMatch(/label/);
    const noPolicy = offramp(['replay', plain, '--data', x]);
    expect(noPolicy.code).not.toBe(0);
    expect(noPolicy.stderr.trim().split('\n')).toHaveLength(1);
    expect(offramp(['tune', split, '--data', x, '--max-drop', 'lots']).code).toBe(2);
    for (const c of ['0', '1', '95', 'high']) {
      const bad = offramp(['tune', split, '--data', x, '--confidence', c]);
      expect(bad.code).toBe(2);
      expect(bad.stderr.trim().split('\n')).toHaveLength(1);
      expect(bad.stderr).toMatch(/--confidence/);
    }
    const missing = offramp(['tune', split, '--data', x, '--labels', y, '--unlabelled', path.join(dir, 'none.npy')]);
    expect(missing.code).toBe(1);
    expect(missing.stderr).toContain('none.npy');
    expect(offramp(['replay', split, '--data', x, '--policy', '{"kind":"nonsense"}']).code).not.toBe(0);
  });
  it('stream scenes: --segments needs --stream, and one id per frame', () => {
    expect(offramp(['tune', split, '--data', x, '--segments', y]).code).toBe(2);
    expect(offramp(['tune', split, '--data', x, '--stream', '--unlabelled', x]).code).toBe(2);
    const few = offramp(['tune', split, '--data', x, '--segments', short, '--stream', '--no-write']);
    expect(few.code).toBe(1);
    expect(few.stderr.trim().split('\n')).toHaveLength(1);
    expect(few.stderr).toContain(short);
    expect(few.stderr).toMatch(/segment ids for \d+ (frames|rows)/);
    expect(offramp(['replay', split, '--data', x, '--policy', '{"kind":"difference","thresholds":[0.1],"distance":"js","exit":0,"refresh":0}']).code).toBe(1);
  });

  it('stream labels as an engineer gives them: one per scene with --segments tunes as one per frame does', () => {
    const st = stream(1500, 77);
    const sx = path.join(dir, 'sx.npy'), sy = path.join(dir, 'sy.npy'), sseg = path.join(dir, 'sseg.npy'), sscene = path.join(dir, 'sscene.npy'), sbad = path.join(dir, 'sbad.npy');
    writeNpy(sx, st.x, [1500, 1, BINS, FRAMES]);
    // the generator's label holds within a scene: the per-scene file is each scene's first frame's label
    const seg = Array.from(st.segment, Number), lab = Array.from(st.y, Number);
    const firsts = seg.flatMap((v, i) => (i === 0 || v !== seg[i - 1] ? [i] : []));
    for (let k = 0; k < firsts.length; k++) for (let i = firsts[k]; i < (firsts[k + 1] ?? seg.length); i++) lab[i] = lab[firsts[k]];
    writeNpy(sy, Int32Array.from(lab), [1500]);
    writeNpy(sseg, Int32Array.from(seg), [1500]);
    writeNpy(sscene, Int32Array.from(firsts.map((i) => lab[i])), [firsts.length]);
    writeNpy(sbad, Int32Array.from(firsts.slice(1).map((i) => lab[i])), [firsts.length - 1]);
    const run = (labels: string) => offramp(['tune', split, '--data', sx, '--labels', labels, '--segments', sseg, '--stream', '--max-drop', '5', '--no-write', '--json']);
    const perFrame = run(sy), perScene = run(sscene);
    expect(perFrame.code, perFrame.stderr).toBe(0);
    expect(perScene.code, perScene.stderr).toBe(0);
    const a = JSON.parse(perFrame.stdout), b = JSON.parse(perScene.stdout);
    expect(b.chosen).toEqual(a.chosen);
    expect(b.guarantee).toEqual(a.guarantee);
    // the same bits on one thread as on every core (the stream search spreads its settings over threads)
    const one = offramp(['tune', split, '--data', sx, '--labels', sy, '--segments', sseg, '--stream', '--max-drop', '5', '--no-write', '--json', '--threads', '1']);
    expect(one.stdout).toBe(perFrame.stdout);
    expect(offramp(['tune', split, '--data', sx, '--stream', '--no-write', '--threads', '0']).code).toBe(2);
    const bad = run(sbad);
    expect(bad.code).toBe(1);
    expect(bad.stderr.trim().split('\n')).toHaveLength(1);
    expect(bad.stderr).toMatch(new RegExp(`${firsts.length - 1} labels for 1500 frames in ${firsts.length} scenes`));
  });
});

describe('tune writes the manifest as a writer of the folder', () => {
  const policy = { rule: { kind: 'confidence' as const, thresholds: [0.9, null] }, tuned: { maxDrop: 1, labelled: true, samples: 1, accuracy: 1, fullAccuracy: 1, meanMacs: 1, fullMacs: 1, exitShare: [1, 0, 0] } };
  it('refuses while another live process holds the folder lock, and leaves the manifest as it was', () => {
    const before = fs.readFileSync(path.join(split, 'manifest.json'));
    // this test process is alive and is not the CLI's: its pid in the lock is a live writer
    fs.writeFileSync(`${split}.lock`, `${process.pid}\n`);
    try {
      const r = offramp(['tune', split, '--data', x, '--labels', y, '--max-drop', '5']);
      expect(r.code).toBe(1);
      expect(r.stderr).toMatch(/another offramp \(pid \d+\) is writing this folder/);
      expect(fs.readFileSync(path.join(split, 'manifest.json')).equals(before)).toBe(true);
    } finally { fs.rmSync(`${split}.lock`, { force: true }); }
  });
  it('does not write a policy over stage files other than those it tuned', () => {
    const file = path.join(split, 'manifest.json');
    const before = fs.readFileSync(file);
    const m = JSON.parse(before.toString('utf8'));
    const other = m.stages.map((st: { sha256: string }, k: number) => ({ sha256: k === 1 ? '0'.repeat(64) : st.sha256 }));
    expect(() => writeManifestPolicy(split, policy, other)).toThrow(/stage files changed while tuning/);
    expect(fs.readFileSync(file).equals(before)).toBe(true);
    expect(() => writeManifestPolicy(split, policy, m.stages.slice(1))).toThrow(/stage files changed while tuning/);
  });
});

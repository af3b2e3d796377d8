// Issue 16, the library: every exported function named there checks its arguments and throws an
// OfframpError naming the option (before: "Cannot mix BigInt", "paths[0] …", "options.policy is not a
// function", TypeErrors, a manifest recording method "bogus"); it takes what the CLI takes (target names,
// a policy object); and a script classifies with the manifest's policy without importing onnxruntime.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { makeFixture, snapshot, type Fixture } from './helpers/robust.js';
import { OfframpError } from '../lib/errors.js';
import { analyzeModel } from '../lib/cost/analyze.js';
import { buildExits } from '../lib/pipeline/build.js';
import { loadChain } from '../lib/run/chain.js';
import { quantizeSplit } from '../lib/quant/split.js';
import { readNpy } from '../lib/data/npy.js';
import { captureCache, chainLayout } from '../lib/tune/chain-capture.js';
import { runFrame, chainFor, type FramePolicy } from '../lib/policy/policy.js';
import { reachOf } from '../lib/tune/cache.js';
import { saveModel } from '../lib/graph/io.js';
import { tinyMlp } from './helpers/nets.js';
import { writeNpy } from '../lib/data/npy.js';
import { mulberry32 } from '../lib/graph/build.js';

let f: Fixture;
beforeAll(async () => { f = await makeFixture('library'); }, 120_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

/** The call throws an OfframpError of this kind whose message matches. */
async function refuses(call: () => Promise<unknown>, kind: string, message: RegExp): Promise<void> {
  let err: unknown;
  try { await call(); } catch (e) { err = e; }
  expect(err, 'it should have thrown').toBeInstanceOf(OfframpError);
  expect((err as OfframpError).kind).toBe(kind);
  expect((err as Error).message).toMatch(message);
}

describe('exported functions check their arguments', () => {
  test('analyzeModel: a file path is loaded; bad options name the option', async () => {
    const r = await analyzeModel(f.model);
    expect(r.model.macs).toBeGreaterThan(0n);
    await refuses(() => analyzeModel(f.model, { cuts: 'a' as never }), 'usage', /option 'cuts' takes a list of value or node names, not "a"/);
    await refuses(() => analyzeModel(f.model, { batch: 0 }), 'usage', /option 'batch'/);
    await refuses(() => analyzeModel(undefined as never), 'usage', /analyzeModel takes a model/);
    await refuses(() => analyzeModel(path.join(f.dir, 'missing.onnx')), 'io', /no such file/);
  });

  test('quantizeSplit: calibration and percentile checked before anything is written', async () => {
    const before = snapshot(f.dir);
    await refuses(() => quantizeSplit(f.split, { data: f.x, out: path.join(f.dir, 'q'), calibration: 'bogus' as never }), 'usage', /calibration takes minmax, percentile, mse, not "bogus"/);
    await refuses(() => quantizeSplit(f.split, { data: f.x, out: path.join(f.dir, 'q'), calibration: 'percentile', percentile: 'x' as never }), 'usage', /percentile takes a number above 50/);
    await refuses(() => quantizeSplit(f.split, { data: f.x, out: path.join(f.dir, 'q'), samples: 0 }), 'usage', /samples takes a positive whole number/);
    await refuses(() => quantizeSplit(f.split, undefined as never), 'usage', /needs options/);
    expect(snapshot(f.dir)).toEqual(before);
  });

  test("buildExits: takes the CLI's target names; without out or with a bad option names it", async () => {
    const before = snapshot(f.dir);
    await refuses(() => buildExits(f.model, { data: f.x } as never), 'usage', /option 'out' takes the output folder, not undefined/);
    await refuses(() => buildExits(f.model, { data: f.x, out: path.join(f.dir, 'b'), target: 'nope' }), 'usage', /--target 'nope' is neither a profile file nor a built-in profile/);
    await refuses(() => buildExits(f.model, { data: f.x, out: path.join(f.dir, 'b'), maxExits: 1.5 }), 'usage', /option 'maxExits' takes a whole number/);
    await refuses(() => buildExits(f.model, { data: f.x, out: path.join(f.dir, 'b'), confidence: 1e-300 }), 'usage', /option 'confidence' takes a number from 0.5 below 1/);
    await refuses(() => buildExits(f.model, { data: f.x, out: path.join(f.dir, 'b'), int8: true }), 'usage', /option 'int8' judges a target's budget/);
    await refuses(() => buildExits(f.model, { data: f.x, out: path.join(f.dir, 'b'), unlabelled: f.x }), 'usage', /option 'unlabelled' .* holds the same rows as 'data'/);
    expect(snapshot(f.dir)).toEqual(before);
    // the name the CLI takes (lib/chip/target.ts BUILTIN_TARGETS) builds and budgets
    const model = path.join(f.dir, 'mlp.onnx'), x = path.join(f.dir, 'mlp-x.npy');
    saveModel(tinyMlp(), model);
    const r = mulberry32(3);
    writeNpy(x, Float32Array.from({ length: 48 * 16 }, () => r() * 2 - 1), [48, 16]);
    const b = await buildExits(model, { data: x, out: path.join(f.dir, 'b'), target: 'm4f', candidates: 3 });
    expect(b.budget?.target.name).toBe('m4f');
  }, 120_000);
});

describe('chain.run', () => {
  test('takes the manifest policy object and plain arrays; exits where replay and tune decide it', async () => {
    const chain = await loadChain(f.split);
    try {
      // the manifest's policy (the full model, on 120 rows: nothing certified) and a bolder one that does exit early
      const rules: FramePolicy[] = [chain.manifest.policy!.rule as FramePolicy, { kind: 'confidence', thresholds: [0.6, 0.6] }, { kind: 'patience', patience: 2, thresholds: [] }];
      const x = readNpy(f.x);
      const per = x.data.length / x.header.shape[0];
      // the tuner's own simulation of the same policy on the same rows (lib/policy runFrame over the exit cache)
      const { cache, layout } = await captureCache(chain, f.x);
      const layout0 = chainLayout(chain.manifest);
      const E1 = cache.exits + 1, C = cache.classes;
      let early = 0;
      for (const rule of rules) {
        const ch = chainFor(rule, reachOf(layout.costs, layout0.exits.length), cache.exits, cache.classes);
          for (let i = 0; i < 40; i++) {
          const row = Float32Array.from(x.data.subarray(i * per, (i + 1) * per) as Float32Array);
          const r = await chain.run({ [chain.manifest.inputs[0].name]: row }, { policy: rule });
          const want = runFrame(rule, ch, { data: () => cache.logits, offset: (k) => (i * E1 + k) * C });
          expect(r.exit === null ? cache.exits : layout0.exits.indexOf(r.exit), `${rule.kind} row ${i}`).toBe(want.exit);
          if (r.exit !== null) early++;
        }
      }
      expect(early).toBeGreaterThan(0);
      await refuses(() => chain.run(undefined as never), 'usage', /run\(\) takes \{ '.*': values \}, not nothing/);
      await refuses(() => chain.run({ [chain.manifest.inputs[0].name]: new Float32Array(3) }), 'usage', /takes \d+ values/);
      await refuses(() => chain.run({ [chain.manifest.inputs[0].name]: new Float32Array(per) }, { policy: { kind: 'confidence', thresholds: [0.5] } as never }), 'data', /confidence needs 2 thresholds/);
      await refuses(() => chain.run({ [chain.manifest.inputs[0].name]: new Float32Array(per) }, { policy: 'x' as never }), 'usage', /options\.policy is a policy object/);
    } finally { await chain.release(); }
  });
});

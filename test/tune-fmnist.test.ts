// offramp tune and replay end to end on the Fashion-MNIST CNN fixture (scripts/train-fmnist.py) with
// Debian's dataset-fashion-mnist: graft linear heads on training rows, split at the exits, tune on the
// 10k test set, replay the chosen policy; then recordings made of test images for the stream policies.
// The certification checks use the heads graft chooses by default (grid:4 at both cheap cuts) on the same
// training rows and judge each tuning on test images it did not see.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { readIdxImages, readIdxLabels } from '../lib/data/idx.js';
import { writeNpy } from '../lib/data/npy.js';
import { loadChain } from '../lib/run/chain.js';
import { captureCache } from '../lib/tune/chain-capture.js';
import { reachOf, rowsOf, viewOf, type ExitCache, type ExitCosts } from '../lib/tune/cache.js';
import { evalStream, tuneStream, type StreamTuneResult } from '../lib/tune/stream.js';
import { tune } from '../lib/tune/search.js';
import { argmax, chainFor, fullModel, runFrame, type FramePolicy, type Policy, type StreamPolicy } from '../lib/policy/index.js';
import { mulberry32 } from '../lib/graph/build.js';
import { offramp } from './helpers/cli.js';

const MODEL = 'test/fixtures/fmnist/cnn.onnx';
const DIR = process.env.OFFRAMP_FMNIST ?? '/usr/share/datasets/fashion-mnist';
const have = fs.existsSync(MODEL) && fs.existsSync(`${DIR}/t10k-images-idx3-ubyte.gz`);
if (!have && process.env.CI) throw new Error(`Fashion-MNIST missing at ${DIR}: apt-get install dataset-fashion-mnist`);

const per = 28 * 28;
const json = (r: { code: number; stdout: string; stderr: string }) => {
  if (r.code !== 0) throw new Error(`offramp exited ${r.code}: ${r.stderr}`);
  return JSON.parse(r.stdout);
};

describe.skipIf(!have)('tune and replay on the Fashion-MNIST CNN', () => {
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-tune-'));
  const split = path.join(tmp, 'split');
  // chosen (grid:4) heads at the two cheap cuts (6 % and 53 % of the MACs): every exit of every test image,
  // captured once through that chain and shared by the certification checks
  const gridSplit = path.join(tmp, 'grid-split');
  let cache: ExitCache, costs: ExitCosts, chosenHeads: string[] = [];
  afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
  beforeAll(async () => {
    const train = readIdxImages(`${DIR}/train-images-idx3-ubyte.gz`), trainY = readIdxLabels(`${DIR}/train-labels-idx1-ubyte.gz`);
    const test = readIdxImages(`${DIR}/t10k-images-idx3-ubyte.gz`), testY = readIdxLabels(`${DIR}/t10k-labels-idx1-ubyte.gz`);
    const N = 5000;
    writeNpy(path.join(tmp, 'train.npy'), train.data.slice(0, N * per), [N, 1, 28, 28]);
    writeNpy(path.join(tmp, 'train_y.npy'), Int32Array.from(trainY.subarray(0, N)), [N]);
    writeNpy(path.join(tmp, 'test.npy'), test.data, [test.count, 1, 28, 28]);
    writeNpy(path.join(tmp, 'test_y.npy'), Int32Array.from(testY), [test.count]);
    const g = offramp(['graft', MODEL, '--cuts', '/b1/b1.2/MaxPool_output_0,/b2/b2.2/MaxPool_output_0,/b3/b3.1/Relu_output_0', '--head', 'linear',
      '--data', path.join(tmp, 'train.npy'), '--labels', path.join(tmp, 'train_y.npy'), '-o', path.join(tmp, 'grafted.onnx')]);
    if (g.code !== 0) throw new Error(g.stderr);
    const s = offramp(['split', path.join(tmp, 'grafted.onnx'), '-o', split]);
    if (s.code !== 0) throw new Error(s.stderr);
    // default settings: each exit's head chosen by graft (heads/choose.ts); on these rows it takes grid:4 at both
    const gg = offramp(['graft', MODEL, '--cuts', '/b1/b1.2/MaxPool_output_0,/b2/b2.2/MaxPool_output_0',
      '--data', path.join(tmp, 'train.npy'), '--labels', path.join(tmp, 'train_y.npy'), '-o', path.join(tmp, 'grid.onnx'), '--json']);
    if (gg.code !== 0) throw new Error(gg.stderr);
    chosenHeads = (JSON.parse(gg.stdout).exits as { head: string; choice?: { tried: unknown[] } }[]).map((e) => `${e.head} of ${e.choice?.tried.length}`);
    const gs = offramp(['split', path.join(tmp, 'grid.onnx'), '-o', gridSplit]);
    if (gs.code !== 0) throw new Error(gs.stderr);
    const chain = await loadChain(gridSplit);
    try {
      const c = await captureCache(chain, path.join(tmp, 'test.npy'), Int32Array.from(testY));
      cache = c.cache; costs = c.layout.costs;
    } finally { await chain.release(); }
  }, 300_000);

  /** Accuracy and mean MACs of a policy, and of the full model, on some test images (the runner's own walk). */
  const onImages = (p: FramePolicy, idx: number[]) => {
    const reach = reachOf(costs, cache.exits), ch = chainFor(p, reach, cache.exits, cache.classes), E1 = cache.exits + 1, C = cache.classes;
    let right = 0, fullRight = 0, macs = 0;
    for (const i of idx) {
      const w = runFrame(p, ch, viewOf(cache, i));
      right += w.label === cache.labels[i] ? 1 : 0;
      macs += reach[w.exit] + w.overhead;
      fullRight += argmax(cache.logits, (i * E1 + cache.exits) * C, C) === cache.labels[i] ? 1 : 0;
    }
    return { drop: ((fullRight - right) / idx.length) * 100, saving: 1 - macs / idx.length / reach[cache.exits] };
  };

  it('tuned on 400 labelled test images, the promise holds on the other 9600, block after block', () => {
    // Fashion-MNIST's test set (Debian dataset-fashion-mnist) in 25 disjoint blocks of 400: each block tunes, the rest is new data.
    // The promise is probabilistic (C = 0.95): over 25 blocks, 4 or more broken would have probability ≈ 3 % (binomial tail).
    for (const maxDrop of [1, 3]) {
      let broken = 0, certified = 0, saving = 0, worst = -Infinity;
      for (let b = 0; b < 25; b++) {
        const block = Array.from({ length: 400 }, (_, i) => b * 400 + i), rest = Array.from({ length: 10000 }, (_, i) => i).filter((i) => i < b * 400 || i >= (b + 1) * 400);
        const r = tune(rowsOf(cache, block), costs, { maxDrop, grid: 16 });
        const real = onImages(r.chosen.policy as FramePolicy, rest);
        if (r.guarantee!.certified) { certified++; saving += real.saving; }
        if (real.drop > maxDrop) broken++;
        worst = Math.max(worst, real.drop);
      }
      console.log(`Fashion-MNIST, tuned on 400 samples, max drop ${maxDrop} pp: certified in ${certified} of 25 blocks (mean real saving ${certified ? ((saving / certified) * 100).toFixed(1) : '-'} %), ` +
        `real drop on the other 9600 images at most ${worst.toFixed(2)} pp, broken in ${broken} of 25`);
      expect(broken).toBeLessThanOrEqual(3);
    }
  });

  it('default settings, tuned on 5000 labelled test images: the real drop on the other 5000 stays within 1 point and the saving reaches 65 %', () => {
    console.log(`Fashion-MNIST heads chosen by graft: ${chosenHeads.join(', ')} tried`);
    const first = Array.from({ length: 5000 }, (_, i) => i), second = first.map((i) => i + 5000);
    for (const [tuneOn, newData] of [[first, second], [second, first]]) {
      const r = tune(rowsOf(cache, tuneOn), costs, { maxDrop: 1 });
      const real = onImages(r.chosen.policy as FramePolicy, newData);
      const g = r.guarantee!;
      console.log(`Fashion-MNIST, tuned on 5000 samples: ${g.certified ? `certified bound ${g.bound.toFixed(2)} pp (observed ${g.estimate.toFixed(2)})` : 'not certified'}; ` +
        `on the other 5000 images real drop ${real.drop.toFixed(2)} pp, real saving ${(real.saving * 100).toFixed(1)} % (${r.chosen.policy.kind})`);
      expect(real.drop).toBeLessThanOrEqual(1);
      expect(g.certified).toBe(true);
      // with global-average (linear) heads, the default before heads were chosen, the same check certified about 22 %
      expect(real.saving).toBeGreaterThanOrEqual(0.65);
    }
  });

  it('a certified policy (1 point) on the test set spends clearly fewer MACs; replay agrees with the tuner', () => {
    const r = json(offramp(['tune', split, '--data', path.join(tmp, 'test.npy'), '--labels', path.join(tmp, 'test_y.npy'), '--max-drop', '1', '--json', '--report', path.join(tmp, 'report.html')]));
    const full = r.full.held, chosen = r.chosen.held;
    console.log(`Fashion-MNIST tune: full ${(full.accuracy * 100).toFixed(2)} % at ${full.meanMacs} MACs; chosen ${r.chosen.policy.kind} ${(chosen.accuracy * 100).toFixed(2)} % at ${chosen.meanMacs.toFixed(0)} MACs: saving ${((1 - chosen.meanMacs / full.meanMacs) * 100).toFixed(1)} % (held-out ${chosen.samples} samples; ${r.settings} settings)`);
    expect(r.guarantee.certified).toBe(true);
    expect(r.guarantee.bound).toBeLessThanOrEqual(1);
    expect(chosen.meanMacs).toBeLessThan(0.85 * full.meanMacs);
    const m = JSON.parse(fs.readFileSync(path.join(split, 'manifest.json'), 'utf8'));
    expect(m.policy.rule).toEqual(r.chosen.policy);
    const html = fs.readFileSync(path.join(tmp, 'report.html'), 'utf8');
    expect(html.match(/<svg /g)?.length).toBe(3);
    expect(html).toContain('promise: drop ≤ 1 pp');
    expect(html).not.toMatch(/<script|src=|href=/);
    // replay through the runner spends what the tuner predicted on the same frames
    const p = json(offramp(['replay', split, '--data', path.join(tmp, 'test.npy'), '--labels', path.join(tmp, 'test_y.npy'), '--json', '--csv', path.join(tmp, 'frames.csv')]));
    expect(p.summary.frames).toBe(10000);
    expect(p.summary.meanMacs).toBeLessThan(0.85 * p.summary.fullMacs);
    expect(p.summary.exitShare.length).toBe(4);
    expect(fs.readFileSync(path.join(tmp, 'frames.csv'), 'utf8').split('\n').length).toBe(10002);
    const rows = fs.readFileSync(path.join(tmp, 'frames.csv'), 'utf8').trim().split('\n').slice(1).map((l) => l.split(','));
    const held = rows.filter((_, i) => i % 2 === 1); // the tuner's held-out part: every odd sample
    const heldMacs = held.reduce((a, r) => a + Number(r[3]), 0) / held.length;
    expect(heldMacs).toBeCloseTo(chosen.meanMacs, 3);
  });

  // Recordings built from test images: scenes of minLen–maxLen frames of one image (images lo…hi−1 only), each
  // frame with small noise and a one-pixel jitter now and then; a scene id per frame.
  function recording(name: string, lo: number, hi: number, F: number, seed: number, minLen: number, maxLen: number) {
    const test = readIdxImages(`${DIR}/t10k-images-idx3-ubyte.gz`), testY = readIdxLabels(`${DIR}/t10k-labels-idx1-ubyte.gz`);
    const rnd = mulberry32(seed);
    const x = new Float32Array(F * per), y = new Int32Array(F), seg = new Int32Array(F);
    let i = 0, id = 0;
    while (i < F) {
      const src = lo + Math.floor(rnd() * (hi - lo)), len = minLen + Math.floor(rnd() * (maxLen - minLen + 1));
      let dx = 0, dy = 0;
      for (let f = 0; f < len && i < F; f++, i++) {
        if (rnd() < 0.25) { dx = Math.floor(rnd() * 3) - 1; dy = Math.floor(rnd() * 3) - 1; }
        for (let r = 0; r < 28; r++) for (let c = 0; c < 28; c++) {
          const sx = c - dx, sy = r - dy;
          const v = sx >= 0 && sx < 28 && sy >= 0 && sy < 28 ? test.data[src * per + sy * 28 + sx] : 0;
          x[i * per + r * 28 + c] = Math.min(1, Math.max(0, v + 0.02 * (rnd() - 0.5)));
        }
        y[i] = testY[src]; seg[i] = id;
      }
      id++;
    }
    const file = path.join(tmp, `${name}.npy`);
    writeNpy(file, x, [F, 1, 28, 28]);
    return { file, x, y, seg, F };
  }
  type Rec = ReturnType<typeof recording>;
  async function capture(r: Rec) {
    const chain = await loadChain(split);
    try { return await captureCache(chain, r.file, r.y); } finally { await chain.release(); }
  }
  /** The chosen policy's drop against the full model on a captured recording, in points, and its saving. */
  function onNew(c: ExitCache, costs: ExitCosts, p: Policy) {
    const idx = Int32Array.from({ length: c.samples }, (_, i) => i), reach = reachOf(costs, c.exits);
    const got = evalStream(c, idx, p as StreamPolicy, reach), full = evalStream(c, idx, fullModel(c.exits), reach);
    return { drop: (full.accuracy - got.accuracy) * 100, saving: 1 - got.meanMacs / full.meanMacs };
  }
  const g = (r: StreamTuneResult) =>
    `${r.guarantee.certified ? 'certified' : 'full model kept'}, ${r.guarantee.evidence} scenes certify, estimate ${r.guarantee.estimate.toFixed(2)}, bound ${r.guarantee.bound.toFixed(2)}${r.guarantee.needed ? `, would need ${r.guarantee.needed} scenes` : ''} (${r.guarantee.passed} of ${r.guarantee.tested} tested passed)`;
  let other: { cache: ExitCache } | undefined;
  const otherCache = async () => (other ??= await capture(recording('other', 5000, 10000, 3000, 22, 10, 40))).cache;

  it('a stream policy tuned on a short recording keeps its promise on a recording of other images', async () => {
    // issue 9: a 300-frame recording (a dozen scenes) once gave a policy that lost 7.9 points elsewhere
    const short = recording('short', 0, 5000, 300, 21, 10, 40);
    const { cache, layout } = await capture(short);
    const r = tuneStream(cache, layout.costs, { maxDrop: 0.5, segments: short.seg });
    const p = onNew(await otherCache(), layout.costs, r.chosen.policy);
    console.log(`Fashion-MNIST stream, short tuning recording (300 frames, ${r.scenes.tune + r.scenes.held} scenes): ${g(r)}; on 3000 frames of other images: drop ${p.drop.toFixed(2)} points, saving ${(p.saving * 100).toFixed(1)} %`);
    expect(p.drop).toBeLessThanOrEqual(0.5);
    expect(r.guarantee.unit).toBe('scenes');
    expect(r.guarantee.certified).toBe(false);
  });

  it('tuned on a long recording: the promise holds on a second recording, and replay spends what the tuner counted', async () => {
    const long = recording('long', 0, 5000, 10000, 31, 10, 40);
    const { cache, layout } = await capture(long);
    const o = { segments: long.seg, kinds: ['difference'] as const, grid: 12 };
    const tight = tuneStream(cache, layout.costs, { ...o, maxDrop: 0.5 }), loose = tuneStream(cache, layout.costs, { ...o, maxDrop: 2.5 });
    const nw = await otherCache();
    const t = onNew(nw, layout.costs, tight.chosen.policy), l = onNew(nw, layout.costs, loose.chosen.policy);
    // what the cheapest front setting within 0.5 points on the certification part would have given, uncertified
    const un = tight.kinds[0].front.filter((p) => (tight.full.held.accuracy - p.held.accuracy) * 100 <= 0.5).sort((a, b) => a.held.meanMacs - b.held.meanMacs)[0];
    const u = un && onNew(nw, layout.costs, un.policy);
    console.log(`Fashion-MNIST stream, long tuning recording (10000 frames, ${tight.scenes.tune + tight.scenes.held} scenes), on 3000 frames of other images:\n` +
      `  max drop 0.5: ${g(tight)}; real drop ${t.drop.toFixed(2)} points, saving ${(t.saving * 100).toFixed(1)} % (target: ≥ 90 % at ≤ 0.5)\n` +
      `  max drop 2.5: ${g(loose)}; real drop ${l.drop.toFixed(2)} points, saving ${(l.saving * 100).toFixed(1)} %, refresh ${(loose.chosen.policy as StreamPolicy).refresh ?? '-'}\n` +
      `  uncertified, cheapest within 0.5 on the certification part: ${u ? `real drop ${u.drop.toFixed(2)} points, saving ${(u.saving * 100).toFixed(1)} %` : 'none'}`);
    expect(t.drop).toBeLessThanOrEqual(0.5);
    expect(l.drop).toBeLessThanOrEqual(2.5);
    expect(loose.guarantee.certified).toBe(true);
    // the net shares bounded as one paired number per scene (betting bound), two chains of fixed sequences: about
    // 78 % where bounding lost and gained shares apart, one sequence, certified about 70 % (issue 20)
    expect(l.saving).toBeGreaterThan(0.72);
    // the certification part replayed alone through the staged runner, from a fresh stream: it spends what the tuner counted, refresh included
    const n = loose.split.tune;
    writeNpy(path.join(tmp, 'tail.npy'), long.x.slice(n * per), [long.F - n, 1, 28, 28]);
    writeNpy(path.join(tmp, 'tail_y.npy'), long.y.slice(n), [long.F - n]);
    const rp = json(offramp(['replay', split, '--data', path.join(tmp, 'tail.npy'), '--labels', path.join(tmp, 'tail_y.npy'), '--policy', JSON.stringify(loose.chosen.policy), '--json'])).summary;
    expect(rp.meanMacs).toBeCloseTo(loose.chosen.held.meanMacs, 3);
    expect(rp.accuracy).toBeCloseTo(loose.chosen.held.accuracy, 12);
  });
});

// Certified savings on Fashion-MNIST (Debian dataset-fashion-mnist) with the committed CNN fixture, as a new
// user would get them, each judged on images the tuning never saw. Not a test: the figures it prints go into
// the commit messages and DEVELOPERS.md when the bounds or the search change.
//
//   npm run build && node dist/scripts/measure-certify.js WORK [frame|scarce|stream]... [--head H (default: graft chooses)]
//
// WORK keeps the grafted split and the captured exit caches (the long recordings take minutes to capture),
// so a second run measures only the tuner. Images: train 0…4999 fit the heads; the per-frame checks tune on
// test images and judge on the other test images; the recordings are made of train images 5000…32499
// (tuning) and 32500…59999 (judging), scenes of 20–200 frames of one image with small noise and a
// one-pixel shift now and then, one label and one segment id per scene.
import fs from 'node:fs';
import path from 'node:path';
import { main } from '../lib/cli/main.js';
import { readIdxImages, readIdxLabels } from '../lib/data/idx.js';
import { writeNpy } from '../lib/data/npy.js';
import { mulberry32 } from '../lib/graph/build.js';
import { loadChain } from '../lib/run/chain.js';
import { captureCache } from '../lib/tune/chain-capture.js';
import { makeCache, reachOf, rowsOf, viewOf, type ExitCache, type ExitCosts } from '../lib/tune/cache.js';
import { tune } from '../lib/tune/search.js';
import { evalStream } from '../lib/tune/stream.js';
import { tuneStreamThreaded } from '../lib/tune/stream-threads.js';
import { argmax, chainFor, fullModel, runFrame, type FramePolicy, type Policy, type StreamPolicy } from '../lib/policy/index.js';

const DIR = process.env.OFFRAMP_FMNIST ?? '/usr/share/datasets/fashion-mnist';
const MODEL = 'test/fixtures/fmnist/cnn.onnx';
const CUTS = '/b1/b1.2/MaxPool_output_0,/b2/b2.0/Conv_output_0,/b2/b2.2/MaxPool_output_0,/b3/b3.0/Conv_output_0';
const args = process.argv.slice(2);
const hi = args.indexOf('--head');
// without --head, graft chooses each exit's head (its default)
const head = hi >= 0 ? args.splice(hi, 2)[1] : 'chosen';
const [work, ...what] = args;
if (!work) { process.stderr.write('usage: measure-certify WORK [frame|scarce|stream]... [--head H]\n'); process.exit(2); }
const todo = new Set(what.length ? what : ['frame', 'scarce', 'stream']);
const per = 28 * 28;
const w = (...p: string[]) => path.join(work, ...p);
fs.mkdirSync(work, { recursive: true });
const train = readIdxImages(`${DIR}/train-images-idx3-ubyte.gz`), trainY = readIdxLabels(`${DIR}/train-labels-idx1-ubyte.gz`);
const test = readIdxImages(`${DIR}/t10k-images-idx3-ubyte.gz`), testY = readIdxLabels(`${DIR}/t10k-labels-idx1-ubyte.gz`);

async function run(a: string[]): Promise<void> {
  const code = await main(a);
  if (code !== 0) throw new Error(`offramp ${a.join(' ')} exited ${code}`);
}

const split = w(`split-${head.replace(':', '')}`);
if (!fs.existsSync(path.join(split, 'manifest.json'))) {
  writeNpy(w('fit.npy'), train.data.slice(0, 5000 * per), [5000, 1, 28, 28]);
  writeNpy(w('fit_y.npy'), Int32Array.from(trainY.subarray(0, 5000)), [5000]);
  // four distinct cuts (graft refuses --at shares that land on one cut; 35 % and 45 % both fall on b2's pool)
  await run(['graft', MODEL, '--cuts', CUTS, ...(head === 'chosen' ? [] : ['--head', head]), '--data', w('fit.npy'), '--labels', w('fit_y.npy'), '-o', w(`grafted-${head.replace(':', '')}.onnx`)]);
  await run(['split', w(`grafted-${head.replace(':', '')}.onnx`), '-o', split]);
}

/** A captured cache, kept in WORK as raw float32 logits beside its costs. */
async function cached(name: string, make: () => { file: string; labels?: Int32Array }): Promise<{ cache: ExitCache; costs: ExitCosts }> {
  const f = w(`${path.basename(split)}-${name}.cache`), meta = `${f}.json`;
  if (fs.existsSync(meta)) {
    const m = JSON.parse(fs.readFileSync(meta, 'utf8'));
    const b = fs.readFileSync(f);
    const logits = new Float32Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.byteLength));
    return { cache: makeCache(m.samples, m.exits, m.classes, logits, m.labels), costs: m.costs };
  }
  const { file, labels } = make();
  const chain = await loadChain(split);
  const t0 = Date.now();
  try {
    const { cache, layout } = await captureCache(chain, file, labels);
    process.stdout.write(`captured ${name}: ${cache.samples} rows in ${((Date.now() - t0) / 1000).toFixed(0)} s\n`);
    fs.writeFileSync(f, Buffer.from(cache.logits.buffer, cache.logits.byteOffset, cache.logits.byteLength));
    fs.writeFileSync(meta, JSON.stringify({ samples: cache.samples, exits: cache.exits, classes: cache.classes, costs: layout.costs, labels: labels ? [...labels] : undefined }));
    return { cache, costs: layout.costs };
  } finally { await chain.release(); }
}

const testCache = () => cached('test', () => {
  writeNpy(w('test.npy'), test.data, [test.count, 1, 28, 28]);
  return { file: w('test.npy'), labels: Int32Array.from(testY) };
});

/** Real drop (points) and saving of a per-frame policy on some rows of a cache, the runner's own walk. */
function onRows(c: ExitCache, costs: ExitCosts, p: FramePolicy, idx: number[]) {
  const reach = reachOf(costs, c.exits), ch = chainFor(p, reach, c.exits, c.classes), E1 = c.exits + 1, C = c.classes;
  let right = 0, fullRight = 0, macs = 0;
  for (const i of idx) {
    const r = runFrame(p, ch, viewOf(c, i));
    right += r.label === c.labels[i] ? 1 : 0; macs += reach[r.exit] + r.overhead;
    fullRight += argmax(c.logits, (i * E1 + c.exits) * C, C) === c.labels[i] ? 1 : 0;
  }
  return { drop: ((fullRight - right) / idx.length) * 100, saving: (1 - macs / idx.length / reach[c.exits]) * 100 };
}
const range = (a: number, b: number) => Array.from({ length: b - a }, (_, i) => a + i);
const say = (s: string) => process.stdout.write(`${s}\n`);
const gOf = (g: { certified: boolean; bound: number; estimate: number; passed: number; tested: number; evidence: number; unlabelled: number }) =>
  `${g.certified ? 'certified' : 'NOT certified'} bound ${g.bound.toFixed(2)} (observed ${g.estimate.toFixed(2)}), ${g.passed}/${g.tested} passed, evidence ${g.evidence}${g.unlabelled ? ` + ${g.unlabelled} unlabelled` : ''}`;

if (todo.has('frame')) {
  const { cache, costs } = await testCache();
  for (const [a, b] of [[range(0, 5000), range(5000, 10000)], [range(5000, 10000), range(0, 5000)]]) {
    const r = tune(rowsOf(cache, a), costs, { maxDrop: 1 });
    const real = onRows(cache, costs, r.chosen.policy as FramePolicy, b);
    say(`frame (${head}), 5000 labelled, max drop 1: ${gOf(r.guarantee!)}; on the other 5000: drop ${real.drop.toFixed(2)} pp, saving ${real.saving.toFixed(1)} % (${r.chosen.policy.kind})`);
  }
}

if (todo.has('scarce')) {
  const { cache, costs } = await testCache();
  // 20 000 unlabelled train images never used for fitting
  const un = await cached('unlabelled', () => {
    writeNpy(w('unl.npy'), train.data.slice(20000 * per, 40000 * per), [20000, 1, 28, 28]);
    return { file: w('unl.npy') };
  });
  for (const b of [0, 1, 2]) {
    const lab = range(b * 400, (b + 1) * 400), judge = range(5000, 10000);
    const u = rowsOf(un.cache, range(0, 20000));
    const noLab = rowsOf({ ...cache, labelled: false, labels: Int32Array.from({ length: cache.samples }, (_, i) => argmax(cache.logits, (i * (cache.exits + 1) + cache.exits) * cache.classes, cache.classes)) }, lab);
    const withLab = tune(rowsOf(cache, lab), costs, { maxDrop: 1, unlabelled: u });
    const alone = tune(u, costs, { maxDrop: 1 });
    const rw = onRows(cache, costs, withLab.chosen.policy as FramePolicy, judge), ra = onRows(cache, costs, alone.chosen.policy as FramePolicy, judge);
    say(`scarce (${head}) block ${b}: 400 labelled + 20000 unlabelled: ${gOf(withLab.guarantee!)}; real drop ${rw.drop.toFixed(2)} pp, saving ${rw.saving.toFixed(1)} %`);
    say(`scarce (${head}) block ${b}: 20000 unlabelled alone: ${gOf(alone.guarantee!)}; real drop ${ra.drop.toFixed(2)} pp, saving ${ra.saving.toFixed(1)} %`);
    // the same rows with the labels left out (no --labels)
    const left = tune(noLab, costs, { maxDrop: 1, unlabelled: u }), rl = onRows(cache, costs, left.chosen.policy as FramePolicy, judge);
    say(`scarce (${head}) block ${b}: the same 400 + 20000 without labels: ${gOf(left.guarantee!)}; real drop ${rl.drop.toFixed(2)} pp, saving ${rl.saving.toFixed(1)} %`);
  }
}

/** A recording of F frames from train images lo…hi−1, and its scene ids. */
function recording(name: string, lo: number, hiImg: number, F: number, seed: number) {
  const rnd = mulberry32(seed);
  const x = new Float32Array(F * per), y = new Int32Array(F), seg = new Int32Array(F);
  let i = 0, id = 0;
  while (i < F) {
    const src = lo + Math.floor(rnd() * (hiImg - lo)), len = 20 + Math.floor(rnd() * 181);
    let dx = 0, dy = 0;
    for (let f = 0; f < len && i < F; f++, i++) {
      if (rnd() < 0.25) { dx = Math.floor(rnd() * 3) - 1; dy = Math.floor(rnd() * 3) - 1; }
      for (let r = 0; r < 28; r++) for (let c = 0; c < 28; c++) {
        const sx = c - dx, sy = r - dy;
        const v = sx >= 0 && sx < 28 && sy >= 0 && sy < 28 ? train.data[src * per + sy * 28 + sx] : 0;
        x[i * per + r * 28 + c] = Math.min(1, Math.max(0, v + 0.02 * (rnd() - 0.5)));
      }
      y[i] = trainY[src]; seg[i] = id;
    }
    id++;
  }
  const file = w(`${name}.npy`);
  writeNpy(file, x, [F, 1, 28, 28]);
  fs.writeFileSync(w(`${name}.seg.json`), JSON.stringify([...seg]));
  return { file, labels: y };
}

if (todo.has('stream')) {
  const F = Number(process.env.FRAMES ?? 100000);
  const rec = await cached(`rec-${F}`, () => recording(`rec-${F}`, 5000, 32500, F, 41));
  const nw = await cached(`new-${F}`, () => recording(`new-${F}`, 32500, 60000, F, 42));
  const seg = JSON.parse(fs.readFileSync(w(`rec-${F}.seg.json`), 'utf8')) as number[];
  const reach = reachOf(rec.costs, rec.cache.exits);
  const onNew = (p: Policy) => {
    const idx = Int32Array.from({ length: nw.cache.samples }, (_, i) => i);
    const got = evalStream(nw.cache, idx, p as StreamPolicy, reach), full = evalStream(nw.cache, idx, fullModel(nw.cache.exits), reach);
    return { drop: (full.accuracy - got.accuracy) * 100, saving: (1 - got.meanMacs / full.meanMacs) * 100 };
  };
  for (const maxDrop of (process.env.MAX_DROPS ?? '1,2').split(',').map(Number)) {
    const t0 = Date.now();
    const r = await tuneStreamThreaded(rec.cache, rec.costs, { maxDrop, segments: seg });
    const real = onNew(r.chosen.policy);
    say(`stream (${head}), ${F} frames, ${r.scenes.tune}+${r.scenes.held} scenes, max drop ${maxDrop}: ${gOf(r.guarantee)}${r.guarantee.needed ? `, needs ${r.guarantee.needed} scenes` : ''}; ` +
      `on the other recording: drop ${real.drop.toFixed(2)} pp, saving ${real.saving.toFixed(1)} % (${JSON.stringify(r.chosen.policy)}) [${((Date.now() - t0) / 1000).toFixed(0)} s]`);
  }
}

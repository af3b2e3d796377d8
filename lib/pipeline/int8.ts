// `build --int8`: the split quantized (calibrated on the rows that fitted the heads), the
// policy tuned on the int8 chain's own exit outputs (the rows that tune), the chain checked
// for top-1 agreement with the grafted model, and the budget judged on the int8 stage files
// as stored. Written into DIR/int8, a split folder of its own.
import fs from 'node:fs';
import path from 'node:path';
import { loadModel } from '../graph/io.js';
import { costModel } from '../cost/report.js';
import { completeShapes } from '../cost/analyze.js';
import { writeNpy } from '../data/npy.js';
import type { DataSource } from '../heads/fit-heads.js';
import { writeManifestPolicy, type Manifest, type ManifestPolicy } from '../split/manifest.js';
import { loadChain } from '../run/chain.js';
import { checkAgreement, npySamples, type AgreementResult } from '../run/check.js';
import { quantizeSplit } from '../quant/split.js';
import { captureCache } from '../tune/chain-capture.js';
import { CERTIFY_SHARE, tune, type TuneResult } from '../tune/search.js';
import { checkBudget, stageFootprints, type Budget, type StageFootprint } from '../chip/budget.js';
import type { Target } from '../chip/target.js';
import { OfframpError } from '../errors.js';
import { INT8_DIR } from '../split/commit.js';

export { INT8_DIR } from '../split/commit.js';

export interface Int8Build {
  dir: string;
  manifest: Manifest;
  tuned: TuneResult;
  policy: ManifestPolicy;
  agreement: AgreementResult;
  budget?: Budget;
  files: string[];
}

export interface Int8Options {
  /** the float build's folder (a split with its grafted model) */
  out: string;
  modelFile: string;
  data: string;
  tuneData: DataSource;
  tuneLabels?: Int32Array;
  /** extra rows without labels, as the float build takes them: they tighten the disagreement term */
  unlabelled?: DataSource;
  sample: number[];
  maxDrop: number;
  /** the promise holds with probability ≥ confidence over the draw of the data (the float build's) */
  confidence: number;
  target?: Target;
  checkSamples?: number;
}

export async function buildInt8(o: Int8Options): Promise<Int8Build> {
  if (!fs.statSync(o.data).isFile()) throw new OfframpError('usage', '--int8 calibrates on .npy data, not a TensorProto folder', o.data);
  const dir = path.join(o.out, INT8_DIR);
  const q = await quantizeSplit(o.out, { data: o.data, out: dir, parity: 0, inScratch: true });

  // The tuning rows (and the unlabelled ones) as .npy files for the chain's capture pass; removed again at the end.
  const rowsFile = path.join(o.out, `.int8-tune-${process.pid}.npy`), freeFile = path.join(o.out, `.int8-free-${process.pid}.npy`);
  toNpy(o.tuneData, o.sample, rowsFile);
  if (o.unlabelled) toNpy(o.unlabelled, o.sample, freeFile);
  try {
    const chain = await loadChain(dir);
    let tuned: TuneResult, agreement: AgreementResult;
    try {
      const { cache, layout } = await captureCache(chain, rowsFile, o.tuneLabels);
      const unlabelled = o.unlabelled ? (await captureCache(chain, freeFile)).cache : undefined;
      // The same split and the same promise as the float build's tuning, on the int8 chain's own outputs.
      tuned = tune(cache, layout.costs, { maxDrop: o.maxDrop, confidence: o.confidence, unlabelled, heldOut: CERTIFY_SHARE });
      agreement = await checkAgreement(chain, o.modelFile, npySamples(q.manifest.inputs, { [q.manifest.inputs[0].name]: rowsFile }, o.checkSamples ?? o.tuneData.rows));
    } finally { await chain.release(); }
    const ch = tuned.chosen, full = tuned.full;
    const policy: ManifestPolicy = {
      rule: ch.policy,
      tuned: {
        maxDrop: o.maxDrop, labelled: tuned.labelled, samples: ch.held.samples, accuracy: ch.held.accuracy, fullAccuracy: full.held.accuracy,
        meanMacs: ch.held.meanMacs, fullMacs: full.held.meanMacs, exitShare: ch.held.exitShare,
      },
      guarantee: tuned.guarantee,
    };
    const manifest = writeManifestPolicy(dir, policy);
    const budget = o.target && await storedBudget(dir, manifest, o.target);
    return { dir, manifest, tuned, policy, agreement, budget, files: q.files };
  } finally { fs.rmSync(rowsFile, { force: true }); fs.rmSync(freeFile, { force: true }); }
}

/** A data source's rows as one float32 .npy. */
function toNpy(src: DataSource, sample: number[], file: string): void {
  const per = sample.reduce((a, b) => a * b, 1);
  const x = new Float32Array(src.rows * per);
  let at = 0;
  for (const b of src.batches(256)) { x.set(b.data, at); at += b.data.length; }
  writeNpy(file, x, [src.rows, ...sample]);
}

/** The budget of the int8 stage files as stored: each file costed on its own, handover buffers from the manifest. */
async function storedBudget(dir: string, m: Manifest, target: Target): Promise<Budget> {
  const stages: StageFootprint[] = [];
  for (const s of m.stages) {
    const sm = loadModel(path.join(dir, s.file));
    const report = costModel(sm, { shapes: await completeShapes(sm, { batch: 1 }) });
    const [fp] = stageFootprints(sm, report);
    const handIn = BigInt(s.inputs.filter((t) => t.from !== 'input').reduce((a, t) => a + t.bytes, 0));
    const handOut = BigInt(s.outputs.filter((t) => t.to.length).reduce((a, t) => a + t.bytes, 0));
    const f = { ...fp.stored, handoverInBytes: handIn, handoverOutBytes: handOut };
    stages.push({ ...fp, index: s.index, cut: s.cut.join('+'), stored: f, int8: f });
  }
  return checkBudget(stages, target, 'stored');
}

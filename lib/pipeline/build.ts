// `offramp build`: from a trained model and data to a folder ready to port.
// scan → fit heads at every candidate cut → choose the exit set by tuning each →
// graft the chosen heads → split → tune → check the chain → budgets → report.
// Every step is a library call used by its own command too; this file only
// sequences them and keeps what the report needs.
import fs from 'node:fs';
import path from 'node:path';
import { loadModel, saveModel, type LoadedModel } from '../graph/io.js';
import type { Model } from '../graph/ir.js';
import { completeShapes } from '../cost/analyze.js';
import { costModel, type CostReport } from '../cost/report.js';
import { reorderGraph } from '../cost/reorder.js';
import { scanModel, resolveCut, type CutPlan } from '../cuts/scan.js';
import { exitCuts } from '../cuts/exits.js';
import { classifierIO, graftExits, type DataSource } from '../heads/fit-heads.js';
import { dataSource, readLabels } from '../heads/sources.js';
import type { HeadKind } from '../heads/spec.js';
import { exitRecords, graftHeads, type ExitRecord } from '../heads/graft.js';
import { writeSplit, writeManifestPolicy, MANIFEST_FILE, type Manifest, type ManifestPolicy } from '../split/manifest.js';
import { loadChain } from '../run/chain.js';
import { checkChain, npySamples, randomSamples, type CheckResult } from '../run/check.js';
import { captureExits } from '../tune/model-capture.js';
import { tune, type TuneResult } from '../tune/search.js';
import { budgetOf, type Budget } from '../chip/budget.js';
import { writeC } from '../emit/write.js';
import type { Target } from '../chip/target.js';
import { OfframpError } from '../errors.js';
import { candidateCuts, choosePlacement, type PlacementSearch } from './placement.js';
import { labelsOfParity, rowsOfParity } from './rows.js';
import { buildInt8, type Int8Build } from './int8.js';

export interface BuildOptions {
  /** calibration inputs (.npy or a TensorProto folder); even rows fit heads, odd rows tune */
  data: string;
  labels?: string;
  out: string;
  target?: Target;
  /** quantize the split to int8 (DIR/int8), tune on the int8 chain, write its firmware and judge its stored files */
  int8?: boolean;
  /** accuracy (percentage points) the policy may lose against the full model (default 1) */
  maxDrop?: number;
  /** most exits to place (default 3) */
  maxExits?: number;
  /** candidate cuts heads are tried at (default 6) */
  candidates?: number;
  head?: HeadKind;
  seed?: number;
  l2?: number;
  /** write the stage files in a memory-aware node order (the budget then judges that order) */
  reorder?: boolean;
  /** samples the staged chain is checked on against the model (default 16) */
  checkSamples?: number;
  progress?: (step: string, detail: string) => void;
}

export interface BuildResult {
  dir: string;
  /** the trained model given */
  source: string;
  /** the grafted model written into dir */
  model: string;
  files: string[];
  candidates: { cut: string; macFraction: number; head: ExitRecord }[];
  placement: PlacementSearch;
  exits: ExitRecord[];
  manifest: Manifest;
  tuned: TuneResult;
  policy: ManifestPolicy;
  check: CheckResult;
  cost: CostReport;
  budget?: Budget;
  /** with --int8: the quantized split, its policy and figures (budget is then the int8 files' as stored) */
  int8?: Int8Build;
}

export const GRAFTED_FILE = 'model.onnx';
/** where the C decision code goes, inside the build folder */
export const FIRMWARE_DIR = 'firmware';

/** Cumulative backbone MACs at each cut value of a plan (by the plan's step order). */
function macsBefore(plan: CutPlan, report: CostReport): (cut: string) => number {
  const byNode = new Map(report.nodes.map((n) => [n.index, n.macs]));
  const cum = new Map<string, number>();
  let acc = 0n;
  for (const ni of plan.steps) {
    acc += byNode.get(ni) ?? 0n;
    for (const o of plan.model.graph.nodes[ni].outputs) cum.set(o, Number(acc));
  }
  return (cut) => cum.get(cut) ?? 0;
}

/** The grafted model reordered so its file order runs stage after stage, as the stage files run, with each stage's last step. */
function stagedOrder(grafted: Model, stages: { nodes: number[] }[]): { model: Model; ends: number[] } {
  const seen = new Set<number>(), order: number[] = [], ends: number[] = [];
  for (const s of stages) {
    for (const n of s.nodes) if (!seen.has(n)) { seen.add(n); order.push(n); }
    ends.push(order.length - 1);
  }
  for (let i = 0; i < grafted.graph.nodes.length; i++) if (!seen.has(i)) order.push(i);
  return { model: { ...grafted, graph: reorderGraph(grafted.graph, order) }, ends: ends.slice(0, -1) };
}

/**
 * Build into a scratch folder beside DIR, then move each file into DIR (the manifest last), so a
 * failed build leaves DIR as it was and a finished one never mixes with an earlier one's files.
 * Files in DIR that a build does not write are left alone.
 */
export async function buildExits(file: string, o: BuildOptions): Promise<BuildResult> {
  const final = path.resolve(o.out);
  const target = path.join(final, GRAFTED_FILE);
  if (fs.existsSync(target) && fs.realpathSync(target) === fs.realpathSync(file)) throw new OfframpError('io', 'refusing to overwrite the source model', target);
  const work = `${final}.partial-${process.pid}`;
  fs.rmSync(work, { recursive: true, force: true });
  try {
    const r = await buildInto(file, { ...o, out: work });
    const rel = (f: string) => path.relative(work, f);
    const moves = r.files.map(rel).sort((a, b) => Number(a === MANIFEST_FILE) - Number(b === MANIFEST_FILE));
    fs.mkdirSync(final, { recursive: true });
    for (const f of moves) {
      fs.mkdirSync(path.dirname(path.join(final, f)), { recursive: true });
      fs.renameSync(path.join(work, f), path.join(final, f));
    }
    // Stage files of an earlier build with more stages would outlive the manifest that named them.
    for (let k = r.manifest.stages.length; fs.existsSync(path.join(final, `stage-${k}.onnx`)); k++) fs.rmSync(path.join(final, `stage-${k}.onnx`));
    return { ...r, dir: o.out, model: path.join(o.out, GRAFTED_FILE), files: moves.map((f) => path.join(o.out, f)) };
  } finally {
    fs.rmSync(work, { recursive: true, force: true });
  }
}

async function buildInto(file: string, o: BuildOptions): Promise<BuildResult> {
  const say = (step: string, detail: string) => o.progress?.(step, detail);
  const maxDrop = o.maxDrop ?? 1, head: HeadKind = o.head ?? { kind: 'linear' }, seed = o.seed ?? 1;
  const model: LoadedModel = loadModel(file);
  const shapes = await completeShapes(model, { batch: 1 });
  const io = classifierIO(model, shapes);
  const all = dataSource(o.data, io.declared, io.sample);
  const labels = o.labels ? readLabels(o.labels) : undefined;
  if (labels && labels.length !== all.rows) throw new OfframpError('data', `${labels.length} labels for ${all.rows} rows of ${o.data}`, o.labels);
  if (all.rows < 8) throw new OfframpError('data', `${all.rows} rows: building needs at least 8 (half fit the heads, half tune the policy)`, o.data);
  const fitData: DataSource = rowsOfParity(all, io.sample, 0), tuneData: DataSource = rowsOfParity(all, io.sample, 1);
  const fitLabels = labels && labelsOfParity(labels, 0), tuneLabels = labels && labelsOfParity(labels, 1);

  say('scan', file);
  const plan = await scanModel(model, { batch: 1 });
  const backbone = costModel(model, { shapes: plan.shapes });
  const cands = candidateCuts(plan, o.candidates ?? 6);
  if (!cands.length) throw new OfframpError('graph', 'no clean cut leaves work on both sides: nowhere to put an exit', file);
  const before = macsBefore(plan, backbone);

  say('fit', `${cands.length} candidate heads on ${fitData.rows} rows`);
  const trial = await graftExits(model, fitData, { head, seed, l2: o.l2, labels: fitLabels, shapes, cuts: cands.map((c) => c.tensors[0].name) });
  say('capture', `exit outputs on ${tuneData.rows} rows`);
  const trialCache = await captureExits({ ...trial.model, file }, tuneData, tuneLabels);
  const trialExits = trialCache.exits;

  say('place', `exit sets of up to ${o.maxExits ?? 3} from ${cands.length} candidates`);
  const reach = trialExits.map((e) => before(e.cut));
  const placement = choosePlacement(trialCache.cache, reach, Number(backbone.model.macs), trialExits.map((e) => e.macs), o.maxExits ?? 3, { maxDrop });
  const chosenCuts = placement.chosen.exits.map((k) => trialExits[k].cut);

  fs.mkdirSync(o.out, { recursive: true });
  const modelFile = path.join(o.out, GRAFTED_FILE);
  say('graft', chosenCuts.join(', '));
  // The heads placement judged, not a refit: graftHeads numbers the exits anew.
  saveModel(graftHeads(model, placement.chosen.exits.map((k) => trial.heads[k]), io.batch), modelFile);
  const g = loadModel(modelFile);

  say('split', `${chosenCuts.length + 1} stages`);
  const gPlan = await scanModel(g, { batch: 1 });
  const split = writeSplit(gPlan, exitCuts(g).map((c) => resolveCut(gPlan, c)), o.out, modelFile, { reorder: o.reorder });

  say('tune', `policies on ${tuneData.rows} rows`);
  const captured = await captureExits(g, tuneData, tuneLabels);
  const stageMacs = split.manifest.stages.map((s) => s.macs);
  // Heads sit inside their stages, so stage MACs already hold them.
  const tuned = tune(captured.cache, { stage: stageMacs, head: captured.exits.map(() => 0) }, { maxDrop });
  const ch = tuned.chosen, full = tuned.full;
  const policy: ManifestPolicy = {
    rule: ch.policy,
    tuned: {
      maxDrop, labelled: tuned.labelled, samples: ch.held.samples, accuracy: ch.held.accuracy, fullAccuracy: full.held.accuracy,
      meanMacs: ch.held.meanMacs, fullMacs: full.held.meanMacs, exitShare: ch.held.exitShare,
    },
  };
  const manifest = writeManifestPolicy(o.out, policy);

  say('emit-c', 'firmware decision code');
  const c = writeC(o.out, path.join(o.out, FIRMWARE_DIR));

  say('check', 'staged chain against the grafted model');
  const chain = await loadChain(o.out);
  let check: CheckResult;
  try {
    // TensorProto folders: seeded random inputs of the right shape, as `offramp check` uses without data.
    const n = o.checkSamples ?? 16;
    const samples = fs.statSync(o.data).isDirectory() ? randomSamples(manifest.inputs, n, seed) : npySamples(manifest.inputs, { [manifest.inputs[0].name]: o.data }, n);
    check = await checkChain(chain, modelFile, samples);
  } finally { await chain.release(); }
  if (!check.ok) throw new OfframpError('runtime', `the staged chain does not reproduce the model: ${check.diffs.filter((d) => !d.ok).map((d) => d.name).join(', ')}`, modelFile);

  let int8: Int8Build | undefined;
  if (o.int8) {
    say('quantize', `int8 stage files calibrated on ${fitData.rows} rows, policy tuned on the int8 chain`);
    int8 = await buildInt8({ out: o.out, modelFile, data: o.data, tuneData, tuneLabels, sample: io.sample, maxDrop, target: o.target, checkSamples: o.checkSamples });
    // The firmware decides on the chain that runs: the int8 one.
    writeC(int8.dir, path.join(o.out, FIRMWARE_DIR));
  }

  say('budget', o.target ? o.target.name ?? 'target' : 'no target given');
  const staged = stagedOrder(g, split.stages);
  const cost = costModel({ ...staged.model, file: modelFile }, { stageEnds: staged.ends, shapes: await completeShapes(staged.model, { batch: 1 }) });
  const budget = int8 ? int8.budget : o.target && budgetOf(staged.model, cost, o.target, 'stored');

  return {
    dir: o.out, source: file, model: modelFile, files: [modelFile, ...split.files, ...c.written, ...(int8?.files ?? [])],
    candidates: cands.map((c, k) => ({ cut: c.tensors[0].name, macFraction: c.macFraction, head: trialExits[k] })),
    placement, exits: exitRecords(g), manifest, tuned, policy, check, cost, budget, ...(int8 && { int8 }),
  };
}

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
import { CERTIFY_SHARE, tune, type TuneResult } from '../tune/search.js';
import { rowsOf, splitParts } from '../tune/cache.js';
import { budgetOf, type Budget } from '../chip/budget.js';
import { writeC } from '../emit/write.js';
import { writeFirmware } from '../firmware/write.js';
import { resolveTarget, targetFromJson, type Ratio, type Target } from '../chip/target.js';
import { OfframpError } from '../errors.js';
import { refuseForeignC } from '../util/own-c.js';
import { writeAtomic } from '../util/atomic.js';
import { scratchOf, withFolder } from '../util/folder.js';
import { commitFolder, FIRMWARE_FILES, hashedName, sha256 } from '../split/commit.js';
import { candidateCuts, choosePlacement, type PlacementSearch } from './placement.js';
import { labelsOfParity, rowsOfParity } from './rows.js';
import { buildInt8, type Int8Build } from './int8.js';
import { measureDevice, type DeviceReport } from '../measure/device.js';

export interface BuildOptions {
  /** calibration inputs (.npy or a TensorProto folder); even rows fit heads, odd rows tune */
  data: string;
  labels?: string;
  out: string;
  /** a target profile, or what the CLI's --target takes: a built-in name (m4f, …) or a profile file */
  target?: Target | string;
  /** quantize the split to int8 (DIR/int8), tune on the int8 chain, write its firmware and judge its stored files */
  int8?: boolean;
  /** accuracy (percentage points) the policy may lose against the full model (default 1) */
  maxDrop?: number;
  /** the promise holds with probability ≥ confidence over the draw of the data (default 0.95) */
  confidence?: number;
  /** extra inputs without labels (.npy or a TensorProto folder): they tighten the disagreement term of the bound */
  unlabelled?: string;
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
  /** with int8: measure the int8 firmware on an emulated core, on the first `rows` rows of `data` in file order */
  measure?: { core: string; rows: number };
  progress?: (step: string, detail: string) => void;
  /** files that describe the build (the reports), committed with it */
  describe?: (r: BuildResult) => DescribingFile[];
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
  /** SHA-256 of the manifest written: what the reports describe */
  manifestSha256: string;
  /** with --int8: the quantized split, its policy and figures (budget is then the int8 files' as stored) */
  int8?: Int8Build;
  /** with measure: the int8 firmware measured on the emulated core */
  device?: DeviceReport;
  /** candidate heads that learnt nothing (agreement at the most common class's share), in words (heads/fit-heads.ts) */
  headWarnings?: string[];
}

/** the grafted model in DIR is model.<hash>.onnx (named by its content, as stage files are) */
export const GRAFTED_STEM = 'model';
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

/** A file a build writes beside its manifest that describes it (the reports), rendered from the result. */
export interface DescribingFile { name: string; data: string | Uint8Array }

/**
 * Build into a scratch folder beside DIR, holding DIR's lock, then move the files in with the
 * manifest as the commit point (split/commit.ts): a failed or stopped build leaves DIR as it
 * was, and DIR is whole at every instant. Files in DIR that a build does not write are left alone.
 */
/** Relative tolerance of the build's chain check (as `offramp check`'s default --rtol). */
const CHECK_RTOL = 1e-5;

/** The options as the CLI checks them, so a script gets the same refusals, each naming the option. */
function checkBuildOptions(file: unknown, o: BuildOptions): BuildOptions & { target?: Target } {
  const bad = (opt: string, what: string, v: unknown) => new OfframpError('usage', `buildExits: option '${opt}' takes ${what}, not ${typeof v === 'bigint' ? `${v}n` : JSON.stringify(v) ?? String(v)}`);
  if (typeof file !== 'string' || !file) throw new OfframpError('usage', `buildExits: the model is a file path, not ${JSON.stringify(file) ?? String(file)}`);
  if (!o || typeof o !== 'object') throw new OfframpError('usage', 'buildExits needs options { data, out, … }');
  for (const k of ['data', 'out'] as const) if (typeof o[k] !== 'string' || !o[k]) throw bad(k, k === 'data' ? 'the calibration data file' : 'the output folder', o[k]);
  for (const k of ['labels', 'unlabelled'] as const) if (o[k] !== undefined && (typeof o[k] !== 'string' || !o[k])) throw bad(k, 'a file path', o[k]);
  const num = (k: keyof BuildOptions, lo: number, hi: number, int = false, open = false) => {
    const v = o[k];
    if (v === undefined) return;
    if (!(typeof v === 'number' && Number.isFinite(v) && (!int || Number.isSafeInteger(v)) && v >= lo && (open ? v < hi : v <= hi)))
      throw bad(k, `${int ? 'a whole number' : 'a number'} from ${lo} ${open ? 'below' : 'up to'} ${hi}`, v);
  };
  num('maxDrop', 0, 100); num('confidence', 0.5, 1, false, true); num('maxExits', 1, 16, true); num('candidates', 1, 64, true);
  num('seed', 0, 2 ** 32 - 1, true); num('checkSamples', 1, 1_000_000, true); num('l2', 0, Number.MAX_VALUE);
  if (o.head !== undefined && !(o.head && typeof o.head === 'object' && ['linear', 'mlp', 'conv', 'grid'].includes((o.head as { kind?: string }).kind ?? '')))
    throw bad('head', "{ kind: 'linear' | 'mlp' | 'conv' | 'grid', … }", o.head);
  // The same rows as unlabelled extras would count twice in the bound (same file by any link, or a copy).
  if (o.unlabelled) {
    const a = fs.statSync(o.data, { throwIfNoEntry: false }), b = fs.statSync(o.unlabelled, { throwIfNoEntry: false });
    if (a?.isFile() && b?.isFile() && ((a.dev === b.dev && a.ino === b.ino) || (a.size === b.size && fs.readFileSync(o.data).equals(fs.readFileSync(o.unlabelled)))))
      throw new OfframpError('usage', `buildExits: option 'unlabelled' (${o.unlabelled}) holds the same rows as 'data' (${o.data}): counted twice they would make the bound look tighter than the evidence is`);
  }
  let target: Target | undefined;
  if (typeof o.target === 'string') target = resolveTarget({ target: o.target });
  else if (o.target !== undefined) {
    const t = o.target as unknown as Record<string, unknown>;
    const ratio = (r: unknown) => !!r && typeof r === 'object' && typeof (r as Ratio).num === 'bigint' && typeof (r as Ratio).den === 'bigint' && (r as Ratio).den > 0n;
    const whole = t && typeof t === 'object' && typeof t.flashBytes === 'bigint' && typeof t.ramBytes === 'bigint' && ratio(t.clockMhz) && ratio(t.macsPerCycle);
    // Anything else is read as a profile file's JSON would be (numbers or byte strings), or refused naming the field.
    try { target = whole ? { ...(o.target as Target), int8MacsPerCycle: (o.target as Target).int8MacsPerCycle ?? (o.target as Target).macsPerCycle } : targetFromJson(o.target); } catch (e) {
      throw e instanceof OfframpError ? new OfframpError('usage', `buildExits: option 'target': ${e.message}`) : e;
    }
  }
  if (o.int8 && !target) throw new OfframpError('usage', "buildExits: option 'int8' judges a target's budget: give 'target' too");
  return { ...o, target };
}

export async function buildExits(file: string, options: BuildOptions): Promise<BuildResult> {
  const o = checkBuildOptions(file, options);
  const final = path.resolve(o.out);
  const work = scratchOf(final);
  // the build replaces the firmware's C files as a whole: one of their names that offramp did not write is refused first
  const fw = path.join(final, FIRMWARE_FILES.dir);
  refuseForeignC((fs.existsSync(fw) ? fs.readdirSync(fw) : []).filter((n) => FIRMWARE_FILES.names.test(n)).map((n) => path.join(fw, n)));
  return withFolder(final, async () => {
    fs.rmSync(work, { recursive: true, force: true });
    let r: BuildResult;
    try { r = await buildInto(file, { ...o, out: work }); } catch (e) {
      // The scratch folder goes when the build stops: an error naming a file in it would name a file that no longer exists.
      if (e instanceof OfframpError && e.file && path.resolve(e.file).startsWith(work + path.sep)) {
        const inside = path.relative(work, path.resolve(e.file)).split(path.sep).join('/');
        throw new OfframpError(e.kind, e.message, file, [`the build's ${inside}`, e.where].filter(Boolean).join(', '));
      }
      throw e;
    }
    const rel = (f: string) => path.relative(work, f).split(path.sep).join('/');
    const at = (f: string) => path.join(o.out, rel(f));
    const done: BuildResult = {
      ...r, dir: o.out, model: at(r.model), files: r.files.map(at),
      manifestSha256: sha256(fs.readFileSync(path.join(work, MANIFEST_FILE))),
    };
    const describing = o.describe?.(done) ?? [];
    for (const d of describing) writeAtomic(path.join(work, d.name), d.data);
    commitFolder(work, final, [...r.files.map(rel), ...describing.map((d) => d.name)], MANIFEST_FILE, [file]);
    return done;
  }, () => fs.rmSync(work, { recursive: true, force: true }));
}

async function buildInto(file: string, o: BuildOptions & { target?: Target }): Promise<BuildResult> {
  const say = (step: string, detail: string) => o.progress?.(step, detail);
  const maxDrop = o.maxDrop ?? 1, confidence = o.confidence ?? 0.95, head: HeadKind | undefined = o.head, seed = o.seed ?? 1;
  if (!(confidence > 0 && confidence < 1)) throw new OfframpError('usage', `--confidence must lie strictly between 0 and 1, not ${confidence}`);
  const model: LoadedModel = loadModel(file);
  const shapes = await completeShapes(model, { batch: 1 });
  const io = classifierIO(model, shapes);
  const all = dataSource(o.data, io.declared, io.sample);
  const labels = o.labels ? readLabels(o.labels, { rows: all.rows, of: o.data, classes: io.classes }) : undefined;
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
  // the final tuning splits the same rows the same way: placement reads the search part only
  const parts = splitParts(trialCache.cache.samples, CERTIFY_SHARE, 'interleave');
  const placement = choosePlacement(rowsOf(trialCache.cache, parts.tune), reach, Number(backbone.model.macs), trialExits.map((e) => e.macs), o.maxExits ?? 3, { maxDrop, confidence, rows: parts.held.length });
  const chosenCuts = placement.chosen.exits.map((k) => trialExits[k].cut);

  fs.mkdirSync(o.out, { recursive: true });
  say('graft', chosenCuts.join(', '));
  // The heads placement judged, not a refit: graftHeads numbers the exits anew.
  const graftedTmp = path.join(o.out, `${GRAFTED_STEM}.onnx`);
  saveModel(graftHeads(model, placement.chosen.exits.map((k) => trial.heads[k]), io.batch), graftedTmp);
  const modelFile = path.join(o.out, hashedName(GRAFTED_STEM, fs.readFileSync(graftedTmp)));
  fs.renameSync(graftedTmp, modelFile);
  const g = loadModel(modelFile);

  say('split', `${chosenCuts.length + 1} stages`);
  const gPlan = await scanModel(g, { batch: 1 });
  const split = writeSplit(gPlan, exitCuts(g).map((c) => resolveCut(gPlan, c)), o.out, modelFile, { reorder: o.reorder, inScratch: true });

  say('tune', `policies on ${tuneData.rows} rows`);
  const captured = await captureExits(g, tuneData, tuneLabels);
  const freeData = o.unlabelled ? dataSource(o.unlabelled, io.declared, io.sample) : undefined;
  const unlabelled = freeData ? (await captureExits(g, freeData)).cache : undefined;
  const stageMacs = split.manifest.stages.map((s) => s.macs);
  // Heads sit inside their stages, so stage MACs already hold them.
  const tuned = tune(captured.cache, { stage: stageMacs, head: captured.exits.map(() => 0) }, { maxDrop, confidence, unlabelled, heldOut: CERTIFY_SHARE });
  const ch = tuned.chosen, full = tuned.full;
  const policy: ManifestPolicy = {
    rule: ch.policy,
    tuned: {
      maxDrop, labelled: tuned.labelled, samples: ch.held.samples, accuracy: ch.held.accuracy, fullAccuracy: full.held.accuracy,
      meanMacs: ch.held.meanMacs, fullMacs: full.held.meanMacs, exitShare: ch.held.exitShare,
    },
    guarantee: tuned.guarantee,
  };
  const manifest = writeManifestPolicy(o.out, policy);

  say('emit-c', 'firmware decision code');
  const c = writeC(o.out, path.join(o.out, FIRMWARE_DIR));

  say('check', 'staged chain against the grafted model');
  // Fusion off on both sides: the same kernel per node, so what differs is the split, not onnxruntime's rounding.
  const chain = await loadChain(o.out, { optimization: 'disabled' });
  let check: CheckResult;
  try {
    // TensorProto folders: seeded random inputs of the right shape, as `offramp check` uses without data.
    const n = o.checkSamples ?? 16;
    const samples = fs.statSync(o.data).isDirectory() ? randomSamples(manifest.inputs, n, seed) : npySamples(manifest.inputs, { [manifest.inputs[0].name]: o.data }, n);
    check = await checkChain(chain, modelFile, samples, { rtol: CHECK_RTOL });
  } finally { await chain.release(); }
  if (!check.ok) {
    const bad = check.diffs.filter((d) => !d.ok);
    const size = (d: CheckResult['diffs'][number]) => d.note ?? `differs by up to ${d.maxAbs.toExponential(2)} (relative ${d.maxRel.toExponential(2)}, over the tolerance ${CHECK_RTOL.toExponential(0)}) in ${d.mismatched} of ${d.elements} values`;
    throw new OfframpError('runtime', `the staged chain does not reproduce the grafted model on ${check.samples} samples: ${bad.map((d) => `${d.name} ${size(d)}`).join('; ')}`, file);
  }

  let int8: Int8Build | undefined;
  let firmware = c.written;
  if (o.int8) {
    say('quantize', `int8 stage files calibrated on ${fitData.rows} rows, policy tuned on the int8 chain`);
    int8 = await buildInt8({ out: o.out, modelFile, data: o.data, tuneData, tuneLabels, unlabelled: freeData, sample: io.sample, maxDrop, confidence, target: o.target, checkSamples: o.checkSamples });
    // The firmware is the chain that runs: the whole int8 network, its exits and policy.
    firmware = writeFirmware(int8.dir, path.join(o.out, FIRMWARE_DIR)).written;
  }
  let device: DeviceReport | undefined;
  if (o.measure) {
    if (!int8) throw new OfframpError('usage', 'measuring runs the int8 firmware: give --int8 with --measure');
    say('measure', `the int8 firmware on an emulated ${o.measure.core}, ${o.measure.rows} rows`);
    const clock = o.target ? Number(o.target.clockMhz.num) / Number(o.target.clockMhz.den) : undefined;
    device = await measureDevice({ dir: int8.dir, data: o.data, labels: o.labels, core: o.measure.core, rows: o.measure.rows, clockMhz: clock });
  }

  say('budget', o.target ? o.target.name ?? 'target' : 'no target given');
  const staged = stagedOrder(g, split.stages);
  const cost = costModel({ ...staged.model, file: modelFile }, { stageEnds: staged.ends, shapes: await completeShapes(staged.model, { batch: 1 }) });
  const budget = int8 ? int8.budget : o.target && budgetOf(staged.model, cost, o.target, 'stored');

  return {
    dir: o.out, source: file, model: modelFile, files: [modelFile, ...split.files, ...new Set([...c.written, ...firmware]), ...(int8?.files ?? [])],
    candidates: cands.map((c, k) => ({ cut: c.tensors[0].name, macFraction: c.macFraction, head: trialExits[k] })),
    placement, exits: exitRecords(g), manifest, tuned, policy, check, cost, budget, manifestSha256: '', ...(int8 && { int8 }), ...(device && { device }),
    ...(trial.warnings.length && { headWarnings: trial.warnings.map((w) => w.replace(/^exit-\d+ at/, 'the candidate head at')) }),
  };
}

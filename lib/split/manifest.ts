// Writing a split: stage-0.<hash>.onnx … stage-K.<hash>.onnx, then manifest.json (schema
// offramp-manifest/1). Every file is written to a temp file and renamed; stage files are
// named by their content and the manifest goes last (the commit point, split/commit.ts), so
// the manifest on disk always names complete stages that exist, whenever the writer stops.
import fs from 'node:fs';
import path from 'node:path';
import type { Model, TensorType } from '../graph/ir.js';
import { costModel, type CostReport } from '../cost/report.js';
import { liveRanges, type LiveValue } from '../cost/memory.js';
import { ioView, qdqView } from '../cost/qdq.js';
import { planArena, type ArenaMethod } from '../cost/arena.js';
import { readsOf } from '../graph/links.js';
import { reorderModel } from '../cost/reorder.js';
import { inferShapes } from '../shapes/infer.js';
import { modelToProto } from '../graph/ir.js';
import { encodeModel, PROTO_LIMIT } from '../onnx/codec.js';
import { bytesFor, dtypeName } from '../onnx/dtype.js';
import { tensorByteSize } from '../onnx/tensor.js';
import { toJson } from '../util/json.js';
import { writeAtomic } from '../util/atomic.js';
import { withFolder } from '../util/folder.js';
import { placeTensors } from '../onnx/external.js';
import { hashedName, ownedBefore, removeDescribing, sha256, sweepAll } from './commit.js';
import { OfframpError } from '../errors.js';
import type { Cut, CutPlan } from '../cuts/scan.js';
import { planStages, stageGraph, stageModel, type StagePlan } from './stages.js';
import type { Policy } from '../policy/policy.js';
import type { Guarantee } from '../certify/guarantee.js';

export const MANIFEST_SCHEMA = 'offramp-manifest/1';
export const MANIFEST_FILE = 'manifest.json';

/** A tensor as the split planned it (symbolic dims bound, e.g. the batch to 1). */
export interface ManifestTensor {
  name: string;
  /** element type name: float32, int64, … */
  dtype: string;
  /** numbers, or a dim name where the planned shape was not concrete */
  shape: (number | string)[];
  /** storage size; 0 where the shape is not concrete */
  bytes: number;
  /** present (true) where the shape was measured on one run: it may depend on input values, and stage files declare the rank only */
  measured?: true;
  /**
   * After `offramp quantize`: int8 parameters, real = (q − zeroPoint) · scale. On an int8 handover
   * tensor, its own; on a float model output (an exit's logits), those of the int8 values the stage
   * dequantized it from (what firmware's `_q8` decision functions read).
   */
  quant?: { scale: number; zeroPoint: number };
}

export interface ManifestStage {
  index: number;
  /** file name, relative to the manifest's folder */
  file: string;
  /** SHA-256 of that file, hex */
  sha256: string;
  /** nodes in the stage file (copied Constant nodes included) */
  nodes: number;
  /** in the stage file's input order; `from` is 'input' for a source-model input, else the stage that hands it over */
  inputs: (ManifestTensor & { from: 'input' | number })[];
  /** in the stage file's output order; `to` lists the later stages that read it; `modelOutput` marks source-model outputs */
  outputs: (ManifestTensor & { to: number[]; modelOutput: boolean })[];
  /** exit outputs this stage makes (exit heads in the source model); empty if none */
  exits: string[];
  /** the tensors crossing the boundary after this stage; empty for the last */
  cut: string[];
  macs: number;
  /** this stage's share of the source model's MACs */
  macFraction: number;
  /** initializers and Constant values stored in the stage file */
  weightBytes: number;
  /** largest sum of live activations while the stage runs, its inputs and outputs included */
  peakActivationBytes: number;
  /** the arena `arena` needs: at least `peakActivationBytes` (absent in manifests written before arena plans) */
  arenaBytes?: number;
  /** bytes of `cut`: what the next stage receives from this one and its predecessors */
  handoverBytes: number;
  /** where each activation of the stage file lives in one arena while the file runs in its node order */
  arena?: ManifestArena;
  /** present after a split with reordering: the stage file's own peak in its first and in its memory-aware node order */
  reorder?: { before: number; after: number };
}

/**
 * An arena plan for one stage file (lib/cost/arena.ts): every value the file reads, makes or hands out has
 * an offset; two buffers share bytes only if no node of the file needs both. Inputs are copied in before
 * the first node and outputs copied out after the last (the handover buffers stay apart from the arena).
 */
export interface ManifestArena {
  /** offsets are multiples of this (bytes) */
  align: number;
  method: ArenaMethod;
  /** in order of first use; `first`/`last`: positions in the stage file's node list while the buffer is needed (inputs from 0) */
  buffers: { name: string; offset: number; bytes: number; first: number; last: number }[];
}

export interface Manifest {
  schema: typeof MANIFEST_SCHEMA;
  source: {
    /** the source model, relative to the manifest's folder ('/' separators) */
    file: string;
    sha256: string;
  };
  /** node order the cuts were placed in: the file's own, or the block-keeping one */
  order: 'file' | 'block';
  /** source-model inputs and outputs (exits included), in graph order */
  inputs: ManifestTensor[];
  outputs: ManifestTensor[];
  stages: ManifestStage[];
  /** weights copied into more than one stage file, by name */
  sharedWeights: { name: string; bytes: number; stages: number[] }[];
  totals: { macs: number; weightBytes: number; stageWeightBytes: number };
  /** the exit policy chosen by tuning; absent until tuned */
  policy?: ManifestPolicy;
  /** present in a folder written by `offramp quantize`: where its float split came from and how it was calibrated */
  quantization?: ManifestQuantization;
}

export interface ManifestQuantization {
  scheme: 'qdq-int8';
  /** the float split's manifest, relative to this manifest's folder, and its SHA-256 */
  from: { file: string; sha256: string };
  calibration: {
    method: 'minmax' | 'percentile' | 'mse';
    /** for percentile: the share kept at each end, in percent */
    percentile?: number;
    /** rows run through the float chain */
    samples: number;
    /** present when only the even or odd rows of the data were used */
    rows?: 'even' | 'odd';
    data: { file: string; sha256: string };
  };
  weights: string; biases: string; activations: string;
  /** BatchNormalization nodes folded into the Conv before them */
  foldedBatchNorms: number;
  /** the float stages' opset, raised for per-channel QuantizeLinear (quant/opset.ts), where it was below 13 */
  opset?: { from: number; to: number };
}

/** A tuned exit policy as the manifest keeps it: the rule, and the evidence it was chosen on. */
export interface ManifestPolicy {
  /** decision rule and thresholds, as lib/policy reads them */
  rule: Policy;
  tuned: {
    /** accuracy (percentage points) the rule was allowed to lose against the full model */
    maxDrop: number;
    /** against labels (true) or against the full model's own answers */
    labelled: boolean;
    /** figures on the certification part */
    samples: number; accuracy: number; fullAccuracy: number; meanMacs: number; fullMacs: number;
    /** share of samples leaving at each exit, the final output last */
    exitShare: number[];
  };
  /** what the rule promises on new data and what the promise rests on (absent from manifests tuned before certification) */
  guarantee?: Guarantee;
}

/** Write `policy` into the manifest of `dir` (atomically), replacing any earlier one. */
export function writeManifestPolicy(dir: string, policy: ManifestPolicy, tunedOn?: readonly { sha256: string }[]): Manifest {
  const file = path.join(dir, MANIFEST_FILE);
  let m: Manifest;
  try { m = JSON.parse(fs.readFileSync(file, 'utf8')) as Manifest; } catch (e) {
    throw new OfframpError('io', `cannot read the manifest: ${(e as Error).message}`, file);
  }
  if (m.schema !== MANIFEST_SCHEMA) throw new OfframpError('decode', `manifest schema is '${m.schema}', expected '${MANIFEST_SCHEMA}'`, file);
  // A policy describes the stage files it was tuned on: a split or build that replaced them meanwhile wins.
  const now = Array.isArray(m.stages) ? m.stages.map((s) => s?.sha256) : [];
  if (tunedOn && (now.length !== tunedOn.length || tunedOn.some((s, k) => s.sha256 !== now[k])))
    throw new OfframpError('io', 'the stage files changed while tuning (another split or build wrote this folder): the policy was not written; tune again', file);
  const out: Manifest = { ...m, policy };
  writeAtomic(file, toJson(out) + '\n');
  return out;
}

/** `stages`: each stage's nodes in the order its file runs them. */
export interface SplitResult { manifest: Manifest; dir: string; files: string[]; stages: StagePlan[] }

/** Split the plan's model at `cuts` into `dir`. `source` is the model file the plan was made from. */
export interface SplitOptions {
  /** Reorder each stage file's nodes to lower its peak activation memory (the order an interpreter runs). */
  reorder?: boolean;
  /** `dir` is a fresh scratch folder whose writer already holds the lock (offramp build) */
  inScratch?: boolean;
}

/**
 * A stage model in its memory-aware order, with its peak before and after; the
 * model unchanged where its values cannot all be sized (measured shapes).
 */
function reorderStage(sm: Model): { model: Model; before: bigint; after: bigint; order: number[] } | undefined {
  try {
    const report = costModel(sm, { shapes: inferShapes(sm) });
    const r = reorderModel(sm, report);
    return { model: r.model, before: r.order.before, after: r.order.after, order: r.order.order };
  } catch (e) {
    if (e instanceof OfframpError) return undefined;
    throw e;
  }
}

/** An arena plan in the manifest's form, from a stage file's live ranges over its file order. */
function manifestArena(ranges: LiveValue[], nodes: number): { bytes: number; plan: ManifestArena } {
  const p = planArena(ranges, { from: 0, to: nodes - 1 });
  return {
    bytes: Number(p.bytes),
    plan: { align: p.align, method: p.method, buffers: p.slots.map((b) => ({ name: b.name, offset: Number(b.offset), bytes: Number(b.bytes), first: b.birth, last: b.death })) },
  };
}

/** The arena plan of a stage file as written: its nodes in file order; copied Constant outputs are weights, not activations. */
function stageArena(sm: Model, s: StagePlan, bytesOf: Map<string, bigint>): { bytes: number; plan: ManifestArena } {
  const nodes = sm.graph.nodes;
  const io = nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));
  return manifestArena(liveRanges(nodes.map((_, i) => i), io, bytesOf, s.inputs.map((i) => i.name), s.outputs.map((o) => o.name)), nodes.length);
}

/**
 * The arena plan of a stage file sized by its own cost report, in file order. On a QDQ file
 * (lib/cost/qdq.ts) a float value inside an int8 kernel is its int8 buffer (the buffer takes the
 * int8 value's name) and values computed from weights alone are weights, not buffers.
 */
export function fileArena(sm: Model, report: CostReport): { bytes: number; plan: ManifestArena } {
  const g = sm.graph, order = g.nodes.map((_, i) => i);
  const sizes = new Map<string, bigint>();
  for (const t of report.model.inputs) sizes.set(t.name, t.bytes);
  for (const n of report.nodes) if (g.nodes[n.index].op !== 'Constant') for (const o of n.outputs) if (o.stored !== 'weight') sizes.set(o.name, o.bytes);
  const io = ioView(g, order, qdqView(g, order));
  return manifestArena(liveRanges(order, io, sizes, report.model.inputs.map((t) => t.name), g.outputs.map((o) => o.name)), order.length);
}

/**
 * Split the plan's model at `cuts` into `dir`, holding the folder's lock (util/folder.ts):
 * a second writer of the same folder is refused, never interleaved.
 */
export function writeSplit(plan: CutPlan, cuts: Cut[], dir: string, source: string, opts: SplitOptions = {}): SplitResult {
  return opts.inScratch ? writeSplitFiles(plan, cuts, dir, source, opts) : withFolder(dir, () => writeSplitFiles(plan, cuts, dir, source, opts));
}

function writeSplitFiles(plan: CutPlan, cuts: Cut[], dir: string, source: string, opts: SplitOptions): SplitResult {
  const m = plan.model;
  const g = m.graph;
  const stages = planStages(plan, cuts);
  fs.mkdirSync(dir, { recursive: true });
  const sourceReal = fs.realpathSync(source);
  const typeOf = (name: string): TensorType | undefined => plan.shapes.values.get(name)?.type;
  // A measured shape held for one run's inputs (zeros) and may depend on values (Range, NonZero):
  // stage files declare its rank only, so other inputs are not refused.
  const fileType = (name: string): TensorType | undefined => {
    const v = plan.shapes.values.get(name);
    return v?.source === 'measured' ? { dtype: v.type.dtype, shape: v.type.shape?.map((_, i) => `?${i}`) } : v?.type;
  };
  const tensor = (name: string): ManifestTensor => {
    const t = typeOf(name) ?? g.inputs.concat(g.outputs).find((v) => v.name === name)?.type;
    const shape = t?.shape ?? [];
    const concrete = shape.every((d) => typeof d === 'number');
    const init = g.initializers.get(name);
    return {
      name, dtype: t ? dtypeName(t.dtype) : init ? dtypeName(init.dataType ?? 0) : 'unknown', shape: [...shape],
      bytes: t && t.shape && concrete ? Number(bytesFor(t.dtype, shape.reduce((a: bigint, d) => a * BigInt(d as number), 1n))) : 0,
      ...(plan.shapes.values.get(name)?.source === 'measured' && { measured: true }),
    };
  };

  const bytesOf = new Map(plan.ranges.map((r) => [r.name, r.bytes]));
  const files: string[] = [];
  const written: StagePlan[] = [];
  // Stage files this call adds: removed again if the split fails before its manifest is in.
  const added: string[] = [];
  let entries: ManifestStage[];
  try {
    entries = stages.map((s) => {
      let sm = stageModel(m, stageGraph(g, s, fileType), s, stages.length);
      const ro = opts.reorder ? reorderStage(sm) : undefined;
      if (ro) sm = ro.model;
      // The stage file's node j is s.nodes[j]; callers get the plan in the order the file runs.
      written.push(ro ? { ...s, nodes: ro.order.map((j) => s.nodes[j]) } : s);
      const arena = stageArena(sm, s, bytesOf);
      // Weights a source saved as external data are inline in the stage: placeTensors drops their
      // external_data entries and data_location, or a runtime would look for the source's file.
      const bytes = encodeModel(placeTensors(modelToProto(sm)).model);
      const file = hashedName(`stage-${s.index}`, bytes);
      const target = path.join(dir, file);
      if (bytes.length > PROTO_LIMIT) throw new OfframpError('io', 'stage over 2 GiB: cut finer', target);
      if (fs.existsSync(target) && fs.realpathSync(target) === sourceReal) throw new OfframpError('io', 'refusing to overwrite the source model', target);
      // Same name, same bytes: a file already there is left as it is (the current manifest may name it).
      if (!(fs.existsSync(target) && sha256(fs.readFileSync(target)) === sha256(bytes))) { writeAtomic(target, bytes); added.push(target); }
      files.push(target);
      return {
        index: s.index, file, sha256: sha256(bytes), nodes: s.nodes.length,
        inputs: s.inputs.map((i) => ({ ...tensor(i.name), from: i.from })),
        outputs: s.outputs.map((o) => ({ ...tensor(o.name), to: o.to, modelOutput: o.modelOutput })),
        exits: s.exits, cut: s.cut, macs: Number(s.macs),
        macFraction: plan.totalMacs ? Number((s.macs * 1000000n) / plan.totalMacs) / 1e6 : 0,
        weightBytes: Number(s.weightBytes), peakActivationBytes: Number(s.peakActivationBytes), arenaBytes: arena.bytes, handoverBytes: Number(s.handoverBytes),
        arena: arena.plan,
        ...(ro && { reorder: { before: Number(ro.before), after: Number(ro.after) } }),
      };
    });
  } catch (e) {
    for (const f of added) fs.rmSync(f, { force: true });
    throw e;
  }

  const holders = new Map<string, number[]>();
  for (const s of stages) {
    const names = [...s.initializers, ...s.nodes.filter((i) => g.nodes[i].op === 'Constant' && !g.nodes[i].inputs.length).flatMap((i) => g.nodes[i].outputs)];
    for (const n of names) { let l = holders.get(n); if (!l) holders.set(n, (l = [])); l.push(s.index); }
  }
  const weightBytes = (name: string) => { const init = g.initializers.get(name); return init ? Number(tensorByteSize(init)) : tensor(name).bytes; };
  const sharedWeights = [...holders].filter(([, l]) => l.length > 1).sort(([a], [b]) => (a < b ? -1 : a > b ? 1 : 0))
    .map(([name, l]) => ({ name, bytes: weightBytes(name), stages: l }));
  const sourceBytes = fs.readFileSync(source);
  const manifest: Manifest = {
    schema: MANIFEST_SCHEMA,
    source: { file: path.relative(path.resolve(dir), path.resolve(source)).split(path.sep).join('/'), sha256: sha256(sourceBytes) },
    order: plan.order,
    inputs: g.inputs.filter((v) => !g.initializers.has(v.name)).map((v) => tensor(v.name)),
    outputs: g.outputs.map((v) => tensor(v.name)),
    stages: entries,
    sharedWeights,
    totals: {
      macs: Number(plan.totalMacs),
      weightBytes: Number([...g.initializers.values()].reduce((a, t) => a + tensorByteSize(t), 0n)),
      stageWeightBytes: entries.reduce((a, e) => a + e.weightBytes, 0),
    },
  };
  // The reports of an earlier build describe the manifest about to be replaced.
  const owned = ownedBefore(dir, MANIFEST_FILE);
  removeDescribing(dir);
  writeAtomic(path.join(dir, MANIFEST_FILE), toJson(manifest) + '\n');
  files.push(path.join(dir, MANIFEST_FILE));
  // Stage files of earlier splits would outlive the manifest that named them.
  sweepAll(dir, manifest, MANIFEST_FILE, [source], owned);
  return { manifest, dir, files, stages: written };
}

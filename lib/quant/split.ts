// `offramp quantize`: a float split folder → a split folder of the same form whose
// stage files are int8 QDQ models. BatchNormalization is folded, activation
// ranges are calibrated by running the rows of the data through the float chain
// (every stage with its activations exposed), and handover tensors between stages
// become int8. The target folder changes as a split's does (split/commit.ts): stage
// files named by their own content first, the manifest last, so it is never half written.
import fs from 'node:fs';
import path from 'node:path';
import type { Model } from '../graph/ir.js';
import { modelToProto } from '../graph/ir.js';
import { parseModel } from '../graph/io.js';
import { encodeModel } from '../onnx/codec.js';
import { dtypeName, INT8 } from '../onnx/dtype.js';
import { tensorByteSize } from '../onnx/tensor.js';
import { inferShapes } from '../shapes/infer.js';
import { costModel } from '../cost/report.js';
import { openSession, runSession, tensorFromData, type OrtTensor, type Session } from '../runtime/ort.js';
import { npyBatches, readNpyHeader, sampleShape, toFloat32 } from '../data/npy.js';
import { readManifest } from '../run/chain.js';
import { fileArena, MANIFEST_FILE, type Manifest, type ManifestStage, type ManifestTensor } from '../split/manifest.js';
import { toJson } from '../util/json.js';
import { writeAtomic } from '../util/atomic.js';
import { withFolder } from '../util/folder.js';
import { hashedName, NESTED, ownedBefore, removeDescribing, sha256, sweepAll } from '../split/commit.js';
import { OfframpError } from '../errors.js';
import { foldBatchNorm } from './fold-bn.js';
import { activationPlan, QDQ_OPS, toQdq, type ActivationPlan, type ActParams } from './qdq.js';
import { CALIBRATION_METHODS, chooseRange, DEFAULT_PERCENTILE, Histogram, RangeObserver, type CalibrationMethod } from './calibrate.js';
import { activationParams } from './linear.js';
import { raiseOpset } from './opset.js';

/**
 * Default calibration: `minmax`. Clipping methods (`percentile`, `mse`) lower the reconstruction error
 * of most values but clip the rare large activations a class decision rests on. Top-1 agreement with the
 * float chain, minmax / percentile / mse (see the closing note for the commands):
 * - Fashion-MNIST CNN, 2 exits, 500 calibration rows, 10k test rows: final output 99.64 / 99.58 / 99.60 %,
 *   second exit 97.42 / 93.23 / 97.68 %;
 * - the invented fan-monitor demo, 1000 calibration rows, 2000 validation rows: final output
 *   99.10 / 91.60 / 96.25 %, second exit 97.95 / 89.65 / 93.80 %.
 * minmax is best or within 0.3 points everywhere; the others stay available.
 */
export const DEFAULT_CALIBRATION: CalibrationMethod = 'minmax';

export interface QuantizeOptions {
  data: string;
  out: string;
  calibration?: CalibrationMethod;
  /** for `percentile`: share kept at each end, in percent */
  percentile?: number;
  /** calibration rows used (the first ones); default all */
  samples?: number;
  /** `out` is a fresh scratch folder whose writer already holds the lock (offramp build) */
  inScratch?: boolean;
  /** use only the even (0) or odd (1) rows of the data (a build calibrates on the rows that fit the heads) */
  parity?: 0 | 1;
  onProgress?: (done: number, total: number) => void;
}

export interface QuantizeResult { dir: string; manifest: Manifest; files: string[]; folded: number; weights: number; biases: number; samples: number }

const rel = (from: string, to: string) => path.relative(path.resolve(from), path.resolve(to)).split(path.sep).join('/');
/**
 * Where the calibration file is, as the manifest records it: relative while it lies near the folder
 * (at most two levels up: beside a build folder, or in its project), so the two move together;
 * absolute when the relative path would climb through unrelated folders.
 */
const dataPath = (from: string, file: string) => {
  const r = rel(from, file);
  return r.split('/').filter((x) => x === '..').length > 2 ? path.resolve(file).split(path.sep).join('/') : r;
};

interface Stage { entry: ManifestStage; file: string; model: Model; plan: ActivationPlan }

/** The stages of a float split, BatchNormalization folded; refuses a folder that is already quantized. */
function readStages(dir: string, manifest: Manifest, manifestFile: string): { stages: Stage[]; folded: number; opset?: { from: number; to: number } } {
  let opset: { from: number; to: number } | undefined;
  if (manifest.quantization) throw new OfframpError('data', `already quantized (from ${manifest.quantization.from.file}): quantize the float split instead`, manifestFile);
  let folded = 0;
  const stages = manifest.stages.map((entry) => {
    const file = path.join(dir, entry.file);
    let bytes: Buffer;
    try { bytes = fs.readFileSync(file); } catch { throw new OfframpError('io', 'stage file is missing', file); }
    if (sha256(bytes) !== entry.sha256) throw new OfframpError('io', 'stage file changed since the split (SHA-256 differs from the manifest)', file);
    const loaded = parseModel(bytes, file);
    const q = loaded.graph.nodes.find((n) => QDQ_OPS.has(n.op));
    if (q || [...entry.inputs, ...entry.outputs].some((t) => t.dtype === 'int8' || t.dtype === 'uint8'))
      throw new OfframpError('data', `already quantized (${q ? `it holds ${q.op}` : 'int8 handover tensors'}): quantize the float split instead`, file);
    // Opset 11/12 raised to 13 where every operator means the same there (quant/opset.ts), else refused by operator.
    const before = inferShapes(loaded, { batch: 1 });
    const raised = raiseOpset(loaded, (v) => before.values.get(v)?.type.shape?.length, file);
    if (raised.from !== raised.to) opset = { from: raised.from, to: raised.to };
    const f = foldBatchNorm(raised.model);
    folded += f.folded;
    const shapes = inferShapes(f.model, { batch: 1 });
    return { entry, file, model: f.model, plan: activationPlan(f.model, shapes) };
  });
  return { stages, folded, opset };
}

/** Calibration rows as batch-1 float32 tensors, checked against the chain input. */
function* rows(data: string, input: ManifestTensor, limit: number, parity?: 0 | 1): Generator<OrtTensor> {
  const h = readNpyHeader(data);
  if (h.rows === 0) throw new OfframpError('data', 'the calibration data has no rows', data);
  const shape = [1, ...sampleShape(h, input.shape, data)];
  let n = 0;
  for (const b of npyBatches(data, 256)) {
    const x = toFloat32(b.data), per = x.length / b.rows;
    for (let r = 0; r < b.rows && n < limit; r++) {
      if (parity !== undefined && (b.start + r) % 2 !== parity) continue;
      n++;
      const row = x.slice(r * per, (r + 1) * per);
      for (let i = 0; i < row.length; i++) if (!Number.isFinite(row[i])) throw new OfframpError('data', `row ${b.start + r} holds a non-finite value (${row[i]}): calibration needs finite data`, data);
      yield tensorFromData(1, shape, row);
    }
  }
}

/** A stage with every planned activation exposed as an output, for calibration. */
async function instrument(s: Stage): Promise<Session> {
  const proto = modelToProto(s.model);
  const g = proto.graph!;
  const have = new Set((g.output ?? []).map((o) => o.name));
  g.output = [...(g.output ?? []), ...s.plan.values.filter((v) => !have.has(v)).map((name) => ({ name }))];
  return openSession(encodeModel(proto), s.file);
}

/** One pass of the rows through the float chain; `see` gets every planned value of every stage. */
async function pass(sessions: Session[], stages: Stage[], data: string, input: ManifestTensor, limit: number, parity: 0 | 1 | undefined,
  see: (name: string, x: Float32Array) => void, onRow?: (n: number) => void): Promise<number> {
  let n = 0;
  for (const x of rows(data, input, limit, parity)) {
    const env = new Map<string, OrtTensor>([[input.name, x]]);
    for (let k = 0; k < stages.length; k++) {
      const feeds: Record<string, OrtTensor> = {};
      for (const i of stages[k].entry.inputs) feeds[i.name] = env.get(i.name)!;
      const out = await runSession(sessions[k], feeds, stages[k].file);
      for (const [name, t] of Object.entries(out)) env.set(name, t);
      for (const v of stages[k].plan.values) {
        const t = env.get(v);
        if (!t || t.type !== 'float32') throw new OfframpError('runtime', `calibration: '${v}' came out as ${t?.type ?? 'nothing'}`, stages[k].file);
        const d = t.data as Float32Array;
        for (let i = 0; i < d.length; i++) if (!Number.isFinite(d[i])) throw new OfframpError('data', `row ${n} makes '${v}' non-finite in ${stages[k].entry.file}`, data);
        see(v, d);
      }
    }
    onRow?.(++n);
  }
  return n;
}

/**
 * Quantize the split in `dir` into `o.out`, holding that folder's lock (util/folder.ts) from the
 * start: stage files named by their own content go in beside the current ones, the manifest last
 * (the commit point, split/commit.ts), then stage files it does not name are removed.
 */
export async function quantizeSplit(dir: string, o: QuantizeOptions): Promise<QuantizeResult> {
  checkQuantizeOptions(o);
  const { manifest: src, file: srcFile } = readManifest(dir);
  const final = path.resolve(o.out);
  refuseOverInput(path.dirname(srcFile), final);
  return o.inScratch ? quantizeInto(src, srcFile, o) : withFolder(final, () => quantizeInto(src, srcFile, o));
}

/** The options, checked as the CLI checks them: a wrong one is an error naming it, never a manifest recording it. */
function checkQuantizeOptions(o: QuantizeOptions): void {
  const bad = (opt: string, what: string, v: unknown) => new OfframpError('usage', `${opt} takes ${what}, not ${JSON.stringify(v) ?? String(v)}`);
  if (!o || typeof o !== 'object') throw new OfframpError('usage', 'quantizeSplit needs options { data, out, … }');
  if (typeof o.data !== 'string' || !o.data) throw bad('data', 'the .npy calibration file', o.data);
  if (typeof o.out !== 'string' || !o.out) throw bad('out', 'the output folder', o.out);
  if (o.calibration !== undefined && !CALIBRATION_METHODS.includes(o.calibration)) throw bad('calibration', CALIBRATION_METHODS.join(', '), o.calibration);
  if (o.percentile !== undefined && !(typeof o.percentile === 'number' && o.percentile > 50 && o.percentile <= 100)) throw bad('percentile', 'a number above 50 and at most 100', o.percentile);
  if (o.samples !== undefined && !(Number.isSafeInteger(o.samples) && o.samples > 0)) throw bad('samples', 'a positive whole number', o.samples);
  if (o.parity !== undefined && o.parity !== 0 && o.parity !== 1) throw bad('parity', '0 or 1', o.parity);
}

const sameDir = (a: string, b: string) => {
  try { const x = fs.statSync(a), y = fs.statSync(b); return x.dev === y.dev && x.ino === y.ino; } catch { return false; }
};

/**
 * The output folder's commit removes what describes its manifest (its nested int8/manifest.json among
 * them) and sweeps the content files of it and its nested folders: the input split must be none of
 * them, under whatever path or link names it (compared by device and inode).
 */
function refuseOverInput(srcDir: string, out: string): void {
  if (sameDir(srcDir, out)) throw new OfframpError('usage', `${out}: refusing to write over an input (the split being quantized)`);
  for (const n of NESTED) if (sameDir(srcDir, path.join(out, n))) throw new OfframpError('usage', `${out}: refusing to write over an input (the split being quantized is its ${n}/ folder, which the commit replaces)`);
}

async function quantizeInto(src: Manifest, srcFile: string, o: QuantizeOptions): Promise<QuantizeResult> {
  const srcDir = path.dirname(srcFile);
  const final = path.resolve(o.out);
  const method = o.calibration ?? DEFAULT_CALIBRATION, pct = o.percentile ?? DEFAULT_PERCENTILE;
  if (src.inputs.length !== 1 || src.inputs[0].dtype !== 'float32') throw new OfframpError('data', 'quantize calibrates a chain with one float32 input', srcFile);
  const input = src.inputs[0];
  const { stages, folded, opset } = readStages(srcDir, src, srcFile);
  const limit = o.samples ?? Infinity;
  const h = readNpyHeader(o.data);
  const total = Math.min(o.parity === undefined ? h.rows : Math.floor((h.rows + 1 - o.parity) / 2), limit);

  // Calibration: min/max in one pass; percentile and mse histogram over that range in a second.
  const sessions: Session[] = [];
  const ranges = new Map<string, RangeObserver>(), hists = new Map<string, Histogram>();
  let samples = 0;
  try {
    for (const s of stages) sessions.push(await instrument(s));
    samples = await pass(sessions, stages, o.data, input, limit, o.parity, (v, d) => {
      let r = ranges.get(v); if (!r) ranges.set(v, (r = new RangeObserver())); r.add(d);
    }, (n) => o.onProgress?.(n, method === 'minmax' ? total : 2 * total));
    if (!samples) throw new OfframpError('data', 'the calibration data has no rows', o.data);
    if (method !== 'minmax') {
      for (const [v, r] of ranges) hists.set(v, new Histogram(r.min, r.max));
      await pass(sessions, stages, o.data, input, limit, o.parity, (v, d) => hists.get(v)!.add(d), (n) => o.onProgress?.(total + n, 2 * total));
    }
  } finally { await Promise.all(sessions.map((s) => s.release())); }

  // Logits are never clipped: an exit's top score is what its decision reads, so outputs take min/max.
  const modelOutputs = new Set(src.outputs.map((t) => t.name));
  const params = new Map<string, ActParams>();
  for (const [v, r] of ranges) {
    const [lo, hi] = modelOutputs.has(v) ? [r.min, r.max] : chooseRange(method, r, hists.get(v), pct);
    params.set(v, activationParams(lo, hi));
  }
  const paramsOf = (v: string, plan: ActivationPlan) => params.get(plan.root.get(v) ?? v);

  // Handover: every float value a later stage reads crosses as int8, unless it is also a model output.
  const handover = new Set<string>();
  for (const s of stages) for (const t of s.entry.outputs) if (t.to.length && !modelOutputs.has(t.name) && t.dtype === 'float32' && s.plan.values.includes(t.name)) handover.add(t.name);
  const handParams = new Map<string, ActParams>();
  for (const s of stages) for (const v of s.plan.values) if (handover.has(v)) handParams.set(v, paramsOf(v, s.plan)!);

  fs.mkdirSync(final, { recursive: true });
  const sourceFile = path.resolve(srcDir, src.source.file);
  // Stage files this call adds: removed again if it fails before its manifest is in.
  const added: string[] = [];
  try {
    let weights = 0, biases = 0;
    const floatBytes = new Map(src.stages.flatMap((x) => x.outputs).map((t) => [t.name, t.bytes]));
    const holders = new Map<string, { bytes: number; stages: number[] }>();
    const entries: ManifestStage[] = stages.map((s) => {
      const stageParams = new Map<string, ActParams>();
      for (const v of s.plan.values) stageParams.set(v, handParams.get(v) ?? paramsOf(v, s.plan)!);
      const int8Inputs = new Set(s.entry.inputs.filter((t) => handover.has(t.name)).map((t) => t.name));
      const int8Outputs = new Set(s.entry.outputs.filter((t) => handover.has(t.name)).map((t) => t.name));
      const q = toQdq(s.model, { params: stageParams, plan: s.plan, int8Inputs, int8Outputs });
      weights += q.weights; biases += q.biases;
      const bytes = encodeModel(modelToProto(q.model));
      // Named by its own bytes: same name, same bytes, so one already there is left as it is.
      const file = hashedName(`stage-${s.entry.index}`, bytes), target = path.join(final, file);
      if (!(fs.existsSync(target) && sha256(fs.readFileSync(target)) === sha256(bytes))) { writeAtomic(target, bytes); added.push(target); }
      const sm = parseModel(bytes, target);
      const cost = costModel(sm, { shapes: inferShapes(sm, { batch: 1 }) });
      const arena = fileArena(sm, cost);
      for (const [name, t] of q.model.graph.initializers) {
        let h = holders.get(name); if (!h) holders.set(name, (h = { bytes: Number(tensorByteSize(t)), stages: [] })); h.stages.push(s.entry.index);
      }
      const retype = <T extends ManifestTensor>(t: T): T => {
        const p = handParams.get(t.name) ?? (modelOutputs.has(t.name) ? params.get(t.name) : undefined);
        const int8 = handover.has(t.name);
        return {
          ...t, ...(int8 && { dtype: dtypeName(INT8), bytes: t.bytes / 4 }),
          ...(p && { quant: { scale: p.scale, zeroPoint: p.zeroPoint } }),
        };
      };
      // The float file's entry, but for what the QDQ file has of its own (a reordering's figures were the float file's).
      const { reorder: _float, ...entry } = s.entry;
      return {
        ...entry, file, sha256: sha256(bytes), nodes: q.model.graph.nodes.length,
        inputs: s.entry.inputs.map(retype), outputs: s.entry.outputs.map(retype),
        weightBytes: Number([...q.model.graph.initializers.values()].reduce((a, t) => a + tensorByteSize(t), 0n)),
        peakActivationBytes: Number(cost.model.peakActivationBytes),
        // the QDQ file's own plan: its value names, int8 buffers where an integer interpreter keeps them
        arenaBytes: arena.bytes, arena: arena.plan,
        handoverBytes: s.entry.cut.reduce((a, n) => a + (handover.has(n) ? (floatBytes.get(n) ?? 0) / 4 : floatBytes.get(n) ?? 0), 0),
      };
    });
    const srcBytes = fs.readFileSync(srcFile);
    const dataBytes = fs.readFileSync(o.data);
    const manifest: Manifest = {
      ...src,
      source: { file: rel(final, sourceFile), sha256: src.source.sha256 },
      outputs: src.outputs.map((t) => { const p = params.get(t.name); return p ? { ...t, quant: { scale: p.scale, zeroPoint: p.zeroPoint } } : t; }),
      stages: entries,
      sharedWeights: [...holders].filter(([, h]) => h.stages.length > 1).sort(([a], [b]) => (a < b ? -1 : a > b ? 1 : 0)).map(([name, h]) => ({ name, ...h })),
      totals: { ...src.totals, stageWeightBytes: entries.reduce((a, e) => a + e.weightBytes, 0) },
      policy: undefined,
      quantization: {
        scheme: 'qdq-int8',
        from: { file: rel(final, srcFile), sha256: sha256(srcBytes) },
        calibration: { method, ...(method === 'percentile' && { percentile: pct }), samples, ...(o.parity !== undefined && { rows: o.parity ? 'odd' as const : 'even' as const }), data: { file: dataPath(final, o.data), sha256: sha256(dataBytes) } },
        weights: 'int8 symmetric per output channel (Conv, Gemm, MatMul)', biases: 'int32, scale s_x·s_w', activations: 'int8 asymmetric per tensor',
        foldedBatchNorms: folded,
        ...(opset && { opset }),
      },
    };
    delete manifest.policy;
    // The commit, as a split makes it: what described the old manifest goes, the manifest comes in,
    // stage files it does not name go last.
    const owned = ownedBefore(final, MANIFEST_FILE);
    removeDescribing(final);
    writeAtomic(path.join(final, MANIFEST_FILE), toJson(manifest) + '\n');
    added.length = 0;
    sweepAll(final, manifest, MANIFEST_FILE, [sourceFile, o.data], owned);
    const files = [...entries.map((e) => e.file), MANIFEST_FILE];
    return { dir: o.out, manifest, files: files.map((f) => path.join(o.out, f)), folded, weights, biases, samples };
  } finally {
    for (const f of added) fs.rmSync(f, { force: true });
  }
}

// The graft pipeline: resolve cuts, capture pooled features in one runtime pass,
// fit a head per cut (backbone frozen), attach them. Deterministic for a seed.
import type { Dim, Model } from '../graph/ir.js';
import { findProduced, topoOrder } from '../graph/links.js';
import { mulberry32 } from '../graph/build.js';
import { FLOAT, dtypeName } from '../onnx/dtype.js';
import { completeShapes } from '../cost/analyze.js';
import type { ShapeResult } from '../shapes/infer.js';
import { OfframpError } from '../errors.js';
import { fitSoftmax, linearLogits } from '../fit/softmax.js';
import { fitMlp, mlpLogits } from '../fit/mlp.js';
import { argmaxRows, labelTargets, matchRate, softTargets, type Features, type Targets } from '../fit/targets.js';
import { axesFor, headName, type HeadKind, type Layout } from './spec.js';
import { inferLayout } from './layout.js';
import { captureFeatures, type Batch } from './capture.js';
import { graftHeads, type ExitRecord, type FittedHead, type HeadInput } from './graft.js';
import { bestTrial, CHOICE_RULE, exitableShare, HEAD_CHOICES, worthOf, type HeadTrial } from './choose.js';
import { costModel } from '../cost/report.js';
import { neededNodes } from '../cuts/order.js';
import { roundNoise } from '../util/json.js';
import type { Dense } from './nodes.js';

/** Calibration inputs: a row count, the per-sample shape, and batches of at most `rows` rows. */
export interface DataSource { rows: number; batches(rows: number): Iterable<Batch> }

export interface GraftOptions {
  /** cut value names (or node names: their first output) */
  cuts: string[];
  /** the head at every exit; without it each exit's is chosen among HEAD_CHOICES (heads/choose.ts) */
  head?: HeadKind;
  layout?: Layout;
  /** integer class labels, one per row; without them heads distil the final output */
  labels?: ArrayLike<number>;
  l2?: number;
  /** softening of the final output for distillation (default 1) */
  temperature?: number;
  seed?: number;
  /** share of rows held out for early stopping and scoring (default 0.1) */
  heldOut?: number;
  /** rows per runtime run when the input batch dim is free (default 64) */
  batchRows?: number;
  shapes?: ShapeResult;
  progress?: (phase: 'capture' | 'fit', done: number, total: number) => void;
}

export interface GraftResult {
  model: Model; heads: FittedHead[];
  /** heads that learnt nothing (agreement at the level of always answering the most common class), in words */
  warnings: string[];
}

const f32 = (a: ArrayLike<number>) => Float32Array.from(a);
const concreteDims = (s: Dim[] | undefined): s is number[] => !!s && s.every((d) => typeof d === 'number');

/** Model input, per-sample shape and final output of a single-input classifier. */
export function classifierIO(model: Model & { file?: string }, shapes: ShapeResult) {
  const g = model.graph, file = model.file;
  const ins = g.inputs.filter((v) => !g.initializers.has(v.name));
  if (ins.length !== 1) throw new OfframpError('graph', `heads need a model with one input, it has ${ins.length}`, file);
  const declared = ins[0].type?.shape;
  const bound = shapes.values.get(ins[0].name)?.type;
  if (!bound?.shape || !concreteDims(bound.shape)) throw new OfframpError('shape', `input '${ins[0].name}' has no concrete shape; give symbolic dims with --dim`, file);
  if (bound.dtype !== FLOAT) throw new OfframpError('graph', `input '${ins[0].name}' is ${dtypeName(bound.dtype)}; calibration data is fed as float32`, file);
  const final = g.outputs[0];
  const ft = shapes.values.get(final.name)?.type;
  if (!ft?.shape || ft.shape.length !== 2 || typeof ft.shape[1] !== 'number' || ft.dtype !== FLOAT)
    throw new OfframpError('graph', `the first output '${final.name}' must be float32 logits [batch, classes]`, file);
  // Rows of data are fed along the input's first axis: it must be the batch the logits come out with.
  if (typeof ft.shape[0] === 'number' && ft.shape[0] !== bound.shape[0])
    throw new OfframpError('shape', `input '${ins[0].name}' is [${bound.shape.join(', ')}] but the logits '${final.name}' [${ft.shape.join(', ')}]: the input's first axis is not the batch (a time-first sequence, [T, N, …], feeding a recurrent layer looks like this); export the model batch-first`, file);
  return {
    input: ins[0].name, declared: declared ?? bound.shape, sample: bound.shape.slice(1), final: final.name, classes: ft.shape[1],
    fixedBatch: typeof declared?.[0] === 'number' ? declared[0] : undefined, batch: (final.type?.shape?.[0] ?? 'N') as Dim,
  };
}

/** Resolve cut names to values, in graph order. */
export function resolveCuts(model: Model & { file?: string }, cuts: string[]): string[] {
  const g = model.graph, order = topoOrder(g), stepOf = new Map(order.map((ni, s) => [ni, s]));
  const out = cuts.map((c) => {
    const v = findProduced(g, c);
    if (!v) throw new OfframpError('usage', `cut '${c}' names no value or node of the graph`, model.file);
    return { name: v.name, step: stepOf.get(v.node)! };
  }).sort((a, b) => a.step - b.step);
  for (let i = 1; i < out.length; i++) if (out[i].name === out[i - 1].name) throw new OfframpError('usage', `cut '${out[i].name}' is given twice`, model.file);
  return out.map((c) => c.name);
}

/** Seeded random 1×1 projection of a conv head (He-uniform, zero bias): fixed, not fitted. */
function randomProjection(cin: number, cout: number, seed: number): Dense {
  const rnd = mulberry32(seed), lim = Math.sqrt(6 / cin);
  return { out: cout, in: cin, W: Float32Array.from({ length: cout * cin }, () => (2 * rnd() - 1) * lim), b: new Float32Array(cout) };
}

/** The recurrent node (LSTM, GRU, RNN) a value comes from, through any ops, if one does. */
function recurrentBefore(model: Model, value: string): string | undefined {
  const made = new Map(model.graph.nodes.flatMap((n) => n.outputs.map((o) => [o, n] as const)));
  const seen = new Set<string>(), todo = [value];
  while (todo.length) {
    const v = todo.pop()!;
    if (seen.has(v)) continue;
    seen.add(v);
    const n = made.get(v);
    if (!n) continue;
    if (n.op === 'LSTM' || n.op === 'GRU' || n.op === 'RNN') return n.op;
    todo.push(...n.inputs.filter(Boolean));
  }
  return undefined;
}

/**
 * MACs of the nodes a value depends on (what a stage ending there computes) and of the whole model, and the
 * parameters of the nodes it does not depend on (the layers an exit there lets a frame skip).
 */
function costsAround(model: Model & { file?: string }, shapes: ShapeResult, values: string[]): { before: number[]; total: number; paramsAfter: number[] } {
  const cost = costModel(model, { shapes });
  const macOf = new Map(cost.nodes.map((n) => [n.index, Number(n.macs)])), paramsOf = new Map(cost.nodes.map((n) => [n.index, Number(n.params)]));
  const sum = (m: Map<number, number>, idx: Iterable<number>) => [...idx].reduce((a, i) => a + (m.get(i) ?? 0), 0);
  const needed = values.map((v) => neededNodes(model.graph, [v]));
  const allParams = sum(paramsOf, paramsOf.keys());
  return { before: needed.map((n) => sum(macOf, n)), total: sum(macOf, macOf.keys()), paramsAfter: needed.map((n) => allParams - sum(paramsOf, n)) };
}

type Input = HeadInput & { width: number; spatial: number };

export async function graftExits(model: Model & { file?: string }, data: DataSource, o: GraftOptions): Promise<GraftResult> {
  const file = model.file, seed = o.seed ?? 1;
  if (!o.cuts.length) throw new OfframpError('usage', 'no cuts given', file);
  const shapes = o.shapes ?? (await completeShapes(model, { batch: 1 }));
  const io = classifierIO(model, shapes);
  const cuts = resolveCuts(model, o.cuts);
  const kinds = o.head ? [o.head] : HEAD_CHOICES;
  // per cut, the heads tried there; heads reading the same pooled features (linear and mlp, or two grids
  // that come out alike on a small map) share one captured feature set
  const captured: Input[] = [], slots = new Map<string, number>();
  const tries = cuts.map((cut, k) => {
    const t = shapes.values.get(cut)?.type;
    if (!t?.shape || !concreteDims(t.shape)) throw new OfframpError('shape', `cut '${cut}' has no concrete shape`, file);
    if (t.dtype !== FLOAT) throw new OfframpError('graph', `cut '${cut}' is ${dtypeName(t.dtype)}; heads read float32 tensors`, file);
    // A head answers once per row of the cut's first axis: that axis must be the batch, or the exit declared
    // [batch, classes] would compute one answer per time step (a recurrent layer's time-first output, [T, N, H]).
    const batch = shapes.values.get(io.final)?.type.shape?.[0];
    if (typeof batch === 'number' && t.shape[0] !== batch)
      throw new OfframpError('shape', `cut '${cut}' is [${t.shape.join(', ')}]: its first axis is not the batch (${batch} here)${recurrentBefore(model, cut) ? `, as a time-first ${recurrentBefore(model, cut)} output is` : ''}; a head there would answer once per step along that axis: cut where the tensor is batch-first, or after the sequence is reduced`, file);
    // rank 3: the layout the graph shows (heads/layout.ts), unless given
    const axes = axesFor(t.shape, o.layout ?? (t.shape.length === 3 ? inferLayout(model, cut) : undefined), cut);
    const shape = t.shape, cin = shape[axes.channel], spatial = axes.pool.reduce((a, i) => a * shape[i], 1);
    const inputOf = (head: HeadKind): Input | undefined => {
      const proj = head.kind === 'conv' ? randomProjection(cin, head.channels, (seed * 0x9e3779b1 + k) >>> 0) : undefined;
      if (head.kind === 'grid' && axes.pool.length) {
        if (axes.channel !== 1) {
          if (o.head) throw new OfframpError('usage', `--head grid pools channels-first tensors; cut '${cut}' is ${axes.layout}`, file);
          return undefined;
        }
        // windows of ⌈dim / cells⌉: at most `cells` per axis, the last one partial when the dim does not divide
        const n = head.cells, grid = axes.pool.map((i) => Math.ceil(shape[i] / n));
        const cells = axes.pool.reduce((a, i, j) => a * Math.ceil(shape[i] / grid[j]), 1);
        return { cut, rank: shape.length, axes, grid, width: cin * cells, spatial };
      }
      // a grid on a feature vector, or one window per axis, is the plain head
      if (head.kind === 'grid' && !o.head) return undefined;
      return { cut, rank: shape.length, axes, proj, width: proj ? proj.out : cin, spatial };
    };
    const list: { head: HeadKind; slot: number }[] = [];
    const seen = new Set<string>();
    for (const head of kinds) {
      const inp = inputOf(head);
      // a grid of one window per axis is the plain head's pooling
      if (!inp || (!o.head && inp.grid && inp.width === cin)) continue;
      const features = `${cut}|${inp.proj ? `conv:${inp.proj.out}` : ''}|${inp.grid?.join('x') ?? ''}`;
      const trial = `${features}|${head.kind === 'mlp' ? head.hidden : ''}`;
      if (seen.has(trial)) continue; // grid:4 on a 2×2 map is grid:2
      seen.add(trial);
      let slot = slots.get(features);
      if (slot === undefined) { slots.set(features, (slot = captured.length)); captured.push(inp); }
      list.push({ head, slot });
    }
    return list;
  });

  const total = data.rows;
  const cap = await captureFeatures(model, captured, io.classes, data.batches(io.fixedBatch ?? o.batchRows ?? 64), {
    input: io.input, sample: io.sample, fixedBatch: io.fixedBatch, final: io.final, file,
    onBatch: (done) => o.progress?.('capture', done, total),
  });
  const n = cap.n, k = io.classes;
  let labels: Int32Array | undefined;
  if (o.labels) {
    if (o.labels.length !== n) throw new OfframpError('data', `${o.labels.length} labels for ${n} samples`, file);
    labels = Int32Array.from(o.labels);
    const bad = labels.findIndex((y) => !(y >= 0 && y < k));
    if (bad >= 0) throw new OfframpError('data', `label ${labels[bad]} at row ${bad} is outside 0..${k - 1} (the model has ${k} classes)`, file);
  }
  const targets: Targets = labels ? labelTargets(labels, k) : softTargets(cap.final, n, k, o.temperature ?? 1);
  const teacher = argmaxRows(cap.final, n, k);
  const fitOpts = { l2: o.l2, seed, heldOut: o.heldOut };
  const around = o.head ? undefined : costsAround(model, shapes, cuts);

  const fitted = (h: Input, head: HeadKind, F: Features, e: number) => {
    let layers: Dense[], loss: number, split: { train: Int32Array; held: Int32Array };
    if (head.kind === 'mlp') {
      const f = fitMlp(F, targets, head.hidden, fitOpts);
      layers = [{ out: f.h, in: f.d, W: f32(f.W1), b: f32(f.b1) }, { out: k, in: f.h, W: f32(f.W2), b: f32(f.b2) }];
      ({ loss, split } = f);
    } else {
      const f = fitSoftmax(F, targets, fitOpts);
      layers = [{ out: k, in: F.d, W: f32(f.W), b: f32(f.b) }];
      ({ loss, split } = f);
    }
    // Scored with the float32 weights the graph will hold, on the held-out rows.
    const logits = layers.length === 1
      ? linearLogits(F, layers[0].W, layers[0].b, k)
      : mlpLogits(F, { d: F.d, h: layers[0].out, k, W1: layers[0].W, b1: layers[0].b, W2: layers[1].W, b2: layers[1].b });
    const pred = argmaxRows(logits, n, k);
    const rows = split.held.length ? split.held : split.train;
    const dense = (l: Dense) => ({ macs: l.in * l.out, params: l.in * l.out + l.out });
    const parts = [...(h.proj ? [{ ...dense(h.proj), macs: h.proj.in * h.proj.out * h.spatial }] : []), ...layers.map(dense)];
    const record: ExitRecord = {
      exit: e, output: `exit-${e}`, cut: h.cut, head: headName(head), layout: h.axes.layout, classes: k,
      macs: parts.reduce((a, p) => a + p.macs, 0), params: parts.reduce((a, p) => a + p.params, 0),
      fit: {
        loss: Number(loss.toPrecision(8)),
        ...(labels && { accuracy: matchRate(pred, labels, rows) }),
        agreement: matchRate(pred, teacher, rows), samples: split.train.length, heldOut: split.held.length,
      },
    };
    return { layers, record, rows, logits };
  };

  const warnings: string[] = [];
  const steps = tries.reduce((a, t) => a + t.length, 0);
  let step = 0;
  const heads: FittedHead[] = tries.map((list, e) => {
    const fits = list.map(({ head, slot }) => {
      o.progress?.('fit', step++, steps);
      return fitted(captured[slot], head, cap.features[slot], e);
    });
    let pick = 0;
    if (around) {
      // chosen on the fit's held-out rows, which certify nothing (heads/choose.ts)
      const skipped = around.total - around.before[e];
      const trials: HeadTrial[] = fits.map((f) => {
        const exitable = exitableShare(f.logits, k, teacher, f.rows);
        return {
          head: f.record.head, macs: f.record.macs, params: f.record.params, agreement: f.record.fit.agreement, exitable: roundNoise(exitable),
          worth: Math.round(worthOf(exitable, skipped, f.record.macs)),
          // a head larger than the layers it lets a frame skip costs more flash than it could ever be worth keeping
          ...(f.record.params > around.paramsAfter[e] && list[fits.indexOf(f)].head.kind !== 'linear' && { tooLarge: true as const }),
        };
      });
      pick = bestTrial(trials);
      fits[pick].record.choice = { rule: CHOICE_RULE, tried: trials };
    }
    const { layers, record, rows } = fits[pick];
    const h = captured[list[pick].slot];
    // Chance level: the share of the most common answer among the scored rows; a head at or below it reads nothing.
    const counts = new Map<number, number>();
    for (const i of rows) counts.set(teacher[i], (counts.get(teacher[i]) ?? 0) + 1);
    const chance = rows.length ? Math.max(...counts.values()) / rows.length : 0;
    if (rows.length && counts.size > 1 && record.fit.agreement <= chance + 0.01) {
      const shape = shapes.values.get(h.cut)?.type.shape ?? [];
      const pc = (x: number) => `${(x * 100).toFixed(1)} %`;
      warnings.push(`exit-${e} at '${h.cut}' agrees with the final output on ${pc(record.fit.agreement)} of held-out rows, no more than always answering its most common class (${pc(chance)}): the head reads nothing useful there` +
        (h.rank === 3 ? `; the cut [${shape.join(', ')}] was pooled as ${h.axes.layout}${h.axes.layout === 'NCL' ? ': if its last axis holds the features (tokens × features), give --layout NTD' : h.axes.layout === 'NTD' ? ': if its second axis holds the channels, give --layout NCL' : ''}` : ''));
    }
    return { cut: h.cut, rank: h.rank, axes: h.axes, proj: h.proj, ...(h.grid ? { grid: h.grid } : {}), layers, record };
  });
  o.progress?.('fit', steps, steps);
  return { model: graftHeads(model, heads, io.batch), heads, warnings };
}

// Budgets: each stage's weights against flash, its working memory against RAM and
// its MACs against the clock, for the model as stored and projected to int8.
// `stageFootprints` reads the model and its cost report; `checkBudget` is plain
// exact arithmetic over those figures and a target.
import type { Model } from '../graph/ir.js';
import { readsOf } from '../graph/links.js';
import type { CostReport, NodeCost } from '../cost/report.js';
import { liveRanges, peakOver } from '../cost/memory.js';
import { ARENA_ALIGN, planArena } from '../cost/arena.js';
import { ioView, qdqView } from '../cost/qdq.js';
import { numel } from '../ops/rule.js';
import { dtypeByName, dtypeInfo } from '../onnx/dtype.js';
import { tensorDims, elementCount } from '../onnx/tensor.js';
import { attrsOf } from '../ops/attrs.js';
import type { RateBasis, Ratio, Target } from './target.js';

/** Conventions of the figures, printed with every budget so nobody has to guess them. */
export const CONVENTIONS = [
  'weights: bytes as stored in the stage files; a weight read by two stages counts in both',
  'int8: 1 byte per floating-point weight; Conv/ConvTranspose/Gemm/MatMul weights add a float32 scale and an int8 zero point per output channel (5 bytes), their biases are int32 (4 bytes per element); BatchNormalization folds into the layer before it (an int32 bias, 4 bytes per channel); integer weights stay as stored',
  `RAM: the stage's arena (an offset for every value of the stage on its own: what it reads from earlier stages, makes and hands on; greedy by size, by breadth, or squeaky-wheel rounds over them, ${ARENA_ALIGN}-byte offsets; at least its peak activation), plus the handover buffers alive while it runs (each value crossing the boundary before or after it, once), which firmware reusing one arena for every stage keeps apart from the arena`,
  'int8 activations: 1 byte per floating-point element; integer tensors stay as stored',
  'latency: cycles = ceil(MACs / macs-per-cycle), time = cycles / clock; other arithmetic, data movement and interpreter overhead are not counted',
  'latency basis: "projected from the measured rate" where the MAC rate was measured on the emulated core (the built-in m4f, m7, m55: instructions per MAC counted exactly, cycles at an estimated cycles per instruction), "from memory" where it was not (m0plus, or a rate given in an option or profile file); cost --measured adds "measured" latencies, from the firmware\'s own instructions',
  'QDQ files as stored: a Conv/Gemm/MatMul between DequantizeLinear and QuantizeLinear runs int8 MACs (int8 rate) and its float tensors are held as int8; dequantized weights are weights, not activations',
  'flash holds weights only: code, interpreter and constants of the firmware come on top',
];

export interface Footprint {
  weightBytes: bigint;
  peakBytes: bigint;
  /** the arena a plan of offsets needs for the stage's values (planArena); the RAM verdict counts this */
  arenaBytes: bigint;
  handoverInBytes: bigint;
  handoverOutBytes: bigint;
}
export interface StageFootprint {
  index: number; cut: string; macs: bigint;
  /** of `macs`, those a QDQ stage runs as int8 (timed at the int8 rate as stored) */
  int8Macs?: bigint;
  stored: Footprint; int8: Footprint;
}

export type Precision = 'stored' | 'int8';
export interface Fit { need: bigint; limit: bigint; margin: bigint; marginPercent: number; fits: boolean }
/** What a latency is: counted on the emulated core (cost --measured), MACs over a measured rate, or over a rate not measured. */
export type LatencyBasis = 'measured' | 'projected from the measured rate' | 'from memory';
export interface StageCheck {
  weightBytes: bigint; peakBytes: bigint; arenaBytes: bigint; handoverBytes: bigint;
  flash: Fit; ram: Fit;
  cycles: bigint; latencyNs: bigint; cumulativeNs: bigint;
  /** where latencyNs and cumulativeNs come from */
  latencyBasis: LatencyBasis;
  fits: boolean;
}
export interface StageBudget { index: number; cut: string; macs: bigint; stored: StageCheck; int8: StageCheck; fits: boolean }
export interface Over { stage: number | 'all'; cut: string; resource: 'flash' | 'ram'; precision: Precision; need: bigint; limit: bigint; margin: bigint; marginPercent: number }
export interface Budget {
  target: { name: string; flashBytes: bigint; ramBytes: bigint; clockMhz: number; macsPerCycle: number; int8MacsPerCycle: number; rough: boolean; note?: string; rateBasis: { float: RateBasis; int8: RateBasis } };
  /** which projection decides the verdict (and the exit code) */
  gate: Precision;
  stages: StageBudget[];
  /** every stage file together in flash; RAM is the largest stage's, as stages run one at a time */
  all: { stored: { flash: Fit; ram: Fit }; int8: { flash: Fit; ram: Fit } };
  fits: boolean;
  over: Over[];
  conventions: string[];
}

const isFloat = (dtype: string) => { const d = dtypeByName(dtype); return !!d && !d.integer && d.name !== 'string'; };

/** Bytes of one weight in int8, given how the stage first uses it. */
function int8WeightBytes(dtype: number, dims: number[], use: { op: string; input: number; transB: boolean; group: number } | undefined): bigint {
  const count = elementCount(dims);
  const info = dtypeInfo(dtype);
  if (info.integer || info.name === 'string') return (count * BigInt(info.bits) + 7n) / 8n;
  if (!use) return count;
  const { op, input } = use;
  // BatchNormalization folds into the layer before it: its four per-channel tensors become one int32 bias.
  if (op === 'BatchNormalization') return input === 1 ? count * 4n : input > 1 ? 0n : count;
  const matrixOp = op === 'Conv' || op === 'ConvTranspose' || op === 'Gemm' || op === 'MatMul';
  if (matrixOp && input === 2 && op !== 'MatMul') return count * 4n;
  if (!matrixOp || input !== 1 || !dims.length) return count;
  const channels = op === 'Conv' ? BigInt(dims[0])
    : op === 'ConvTranspose' ? BigInt((dims[1] ?? 1) * use.group)
    : op === 'Gemm' ? BigInt(use.transB ? dims[0] : dims[1] ?? 1)
    : dims.length >= 2 ? count / BigInt(dims[dims.length - 2] || 1) : 1n;
  return count + channels * 5n;
}

/** Per-stage weights, peak activation and handover, as stored and in int8, for the stages of `report`. */
export function stageFootprints(model: Model, report: CostReport): StageFootprint[] {
  const g = model.graph;
  const order = report.nodes.map((n) => n.index);
  // A QDQ model's float values inside int8 kernels share the int8 buffers (lib/cost/qdq.ts).
  const ioNodes = ioView(g, order, qdqView(g, order));
  const stored = new Map<string, bigint>(), int8 = new Map<string, bigint>();
  const add = (t: { name: string; dtype: string; shape: number[]; bytes: bigint; stored?: 'int8' | 'weight' }) => {
    stored.set(t.name, t.bytes);
    int8.set(t.name, t.stored === 'weight' ? 0n : isFloat(t.dtype) ? numel(t.shape) : t.bytes);
  };
  report.model.inputs.forEach(add);
  for (const n of report.nodes) if (n.op !== 'Constant') n.outputs.forEach(add);
  const ins = report.model.inputs.map((t) => t.name), outs = report.model.outputs.map((t) => t.name);
  const ranges = liveRanges(order, ioNodes, stored, ins, outs);

  // Weights as the cost report counts them: initializers and Constant outputs, once per stage that reads them.
  const weight = new Map<string, { dtype: number; dims: number[]; bytes: bigint }>();
  for (const [name, t] of g.initializers) {
    const dims = tensorDims(t);
    weight.set(name, { dtype: t.dataType ?? 0, dims, bytes: (elementCount(dims) * BigInt(dtypeInfo(t.dataType ?? 0).bits) + 7n) / 8n });
  }
  for (const n of report.nodes) if (n.op === 'Constant') for (const o of n.outputs) weight.set(o.name, { dtype: dtypeByName(o.dtype)?.id ?? 0, dims: o.shape, bytes: o.bytes });

  // Values crossing the boundary after step b: made by then, read (or handed out as a model output) later.
  const crossing = (b: number) => new Set(ranges.filter((v) => v.birth <= b && v.death > b).map((v) => v.name));
  const outputs = new Set(outs);
  const last = report.stages.length - 1;
  return report.stages.map((s, k) => {
    const span: NodeCost[] = report.nodes.slice(s.first, s.last + 1);
    const steps = span.map((n) => n.index);
    const made = new Set(steps.flatMap((i) => g.nodes[i].outputs.filter(Boolean)));
    const before = k > 0 ? crossing(s.first - 1) : new Set<string>();
    const after = k < last ? crossing(s.last) : new Set<string>();
    // The stage's own file: what it reads from before, what it makes, and what it hands on. A value passing
    // through to a later stage is not in it: that one waits in a handover buffer.
    const stageIns = [...new Set(steps.flatMap((i) => readsOf(g.nodes[i])))].filter((r) => stored.has(r) && !made.has(r));
    const stageOuts = [...made].filter((v) => after.has(v) || outputs.has(v));
    const handIn = [...before], handOut = [...after].filter((v) => !before.has(v));
    const uses = new Map<string, { op: string; input: number; transB: boolean; group: number } | undefined>();
    for (const nc of span) {
      const n = g.nodes[nc.index];
      const a = attrsOf(n.attrs);
      for (const r of readsOf(n)) if (weight.has(r) && !uses.has(r)) {
        const input = n.inputs.indexOf(r);
        uses.set(r, input < 0 ? undefined : { op: n.domain ? '' : n.op, input, transB: a.int('transB', 0) === 1, group: a.int('group', 1) });
      }
      if (nc.op === 'Constant') for (const o of nc.outputs) if (!uses.has(o.name)) uses.set(o.name, undefined);
    }
    const w = [...uses].map(([name, use]) => ({ ...weight.get(name)!, use }));
    const fp = (kind: 'stored' | 'int8'): Footprint => {
      const size = kind === 'stored' ? stored : int8;
      const sum = (names: string[]) => names.reduce((a, v) => a + (size.get(v) ?? 0n), 0n);
      const own = liveRanges(steps, ioNodes, size, stageIns, stageOuts);
      return {
        weightBytes: w.reduce((a, x) => a + (kind === 'stored' ? x.bytes : int8WeightBytes(x.dtype, x.dims, x.use)), 0n),
        peakBytes: peakOver(own, 0, steps.length - 1).bytes,
        arenaBytes: planArena(own, { from: 0, to: steps.length - 1 }).bytes,
        handoverInBytes: sum(handIn), handoverOutBytes: sum(handOut),
      };
    };
    return { index: s.index, cut: s.cut, macs: s.macs, ...(s.int8Macs && { int8Macs: s.int8Macs }), stored: fp('stored'), int8: fp('int8') };
  });
}

export function fit(need: bigint, limit: bigint): Fit {
  const margin = limit - need;
  // Percent of the limit, truncated to hundredths of a percent from exact integers.
  return { need, limit, margin, marginPercent: Number((margin * 10000n) / limit) / 100, fits: margin >= 0n };
}

const ceilDiv = (a: bigint, b: bigint) => (a + b - 1n) / b;
/** Cycles for `macs` at `rate` MACs per cycle, rounded up. */
export const cyclesFor = (macs: bigint, rate: Ratio): bigint => ceilDiv(macs * rate.den, rate.num);
/** Nanoseconds for `cycles` at `mhz`, rounded up: cycles · 1000 / MHz. */
export const nanosFor = (cycles: bigint, mhz: Ratio): bigint => ceilDiv(cycles * 1000n * mhz.den, mhz.num);
const ratioNumber = (r: Ratio) => Number(r.num) / Number(r.den);

export function checkBudget(stages: StageFootprint[], t: Target, gate: Precision = 'stored'): Budget {
  const rates = t.rateBasis ?? { float: 'from memory', int8: 'from memory' };
  const projected = (...b: RateBasis[]): LatencyBasis => (b.every((x) => x === 'measured') ? 'projected from the measured rate' : 'from memory');
  const check = (s: StageFootprint, p: Precision, before: bigint): StageCheck => {
    const f = s[p];
    const handoverBytes = f.handoverInBytes + f.handoverOutBytes;
    const flash = fit(f.weightBytes, t.flashBytes), ram = fit(f.arenaBytes + handoverBytes, t.ramBytes);
    // As stored, a QDQ stage's int8 MACs run at the int8 rate and the rest at the float rate.
    const i8 = s.int8Macs ?? 0n;
    const cycles = p === 'stored' ? cyclesFor(s.macs - i8, t.macsPerCycle) + (i8 ? cyclesFor(i8, t.int8MacsPerCycle) : 0n) : cyclesFor(s.macs, t.int8MacsPerCycle);
    const latencyNs = nanosFor(cycles, t.clockMhz);
    const latencyBasis = p === 'int8' || i8 === s.macs ? projected(rates.int8) : i8 ? projected(rates.float, rates.int8) : projected(rates.float);
    return { weightBytes: f.weightBytes, peakBytes: f.peakBytes, arenaBytes: f.arenaBytes, handoverBytes, flash, ram, cycles, latencyNs, cumulativeNs: before + latencyNs, latencyBasis, fits: flash.fits && ram.fits };
  };
  const out: StageBudget[] = [];
  let sumS = 0n, sum8 = 0n;
  for (const s of stages) {
    const stored = check(s, 'stored', sumS), int8 = check(s, 'int8', sum8);
    sumS = stored.cumulativeNs; sum8 = int8.cumulativeNs;
    out.push({ index: s.index, cut: s.cut, macs: s.macs, stored, int8, fits: (gate === 'stored' ? stored : int8).fits });
  }
  const whole = (p: Precision) => ({
    flash: fit(out.reduce((a, s) => a + s[p].weightBytes, 0n), t.flashBytes),
    ram: fit(out.reduce((a, s) => (s[p].ram.need > a ? s[p].ram.need : a), 0n), t.ramBytes),
  });
  const all = { stored: whole('stored'), int8: whole('int8') };
  const over: Over[] = [];
  const note = (stage: number | 'all', cut: string, resource: 'flash' | 'ram', f: Fit) => {
    if (!f.fits) over.push({ stage, cut, resource, precision: gate, need: f.need, limit: f.limit, margin: f.margin, marginPercent: f.marginPercent });
  };
  for (const s of out) { note(s.index, s.cut, 'flash', s[gate].flash); note(s.index, s.cut, 'ram', s[gate].ram); }
  // With one stage, the whole-model flash row repeats the stage's; report it once.
  if (out.length > 1) note('all', '', 'flash', all[gate].flash);
  return {
    target: {
      name: t.name ?? 'custom', flashBytes: t.flashBytes, ramBytes: t.ramBytes, clockMhz: ratioNumber(t.clockMhz),
      macsPerCycle: ratioNumber(t.macsPerCycle), int8MacsPerCycle: ratioNumber(t.int8MacsPerCycle), rough: !!t.rough, ...(t.note && { note: t.note }), rateBasis: { ...rates },
    },
    gate, stages: out, all, fits: over.length === 0, over, conventions: CONVENTIONS,
  };
}

/** The budget of a model's cost report (its stages, or the whole model as one stage) on a target. */
export const budgetOf = (model: Model, report: CostReport, t: Target, gate: Precision = 'stored'): Budget =>
  checkBudget(stageFootprints(model, report), t, gate);

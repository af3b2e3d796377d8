// QDQ stage files → the integer program. A QDQ file spells each int8 kernel as
// DequantizeLinear → op (→ Relu | Clip) → QuantizeLinear (lib/quant/qdq.ts writes it so); this
// pass reads that pattern back into kernel parameters: int8 weights with their per-channel
// scales, int32 biases with the input zero point folded in, fixed-point multipliers, the fused
// activation as the clamp, and a slot for every int8 tensor (the arena plan's offset, a handover
// buffer, or an exit's logits). Anything else is refused by op type, node and file.
import path from 'node:path';
import type { Model, Node } from '../graph/ir.js';
import { loadModel } from '../graph/io.js';
import { readsOf } from '../graph/links.js';
import { attrsOf } from '../ops/attrs.js';
import { windowOf } from '../ops/window.js';
import { inferShapes, type ShapeResult } from '../shapes/infer.js';
import { tensorDims } from '../onnx/tensor.js';
import type { TensorProto } from '../onnx/types.js';
import { FLOAT, INT8, INT32, INT64 } from '../onnx/dtype.js';
import { floatValues } from '../quant/fold-bn.js';
import { OfframpError } from '../errors.js';
import type { Manifest, ManifestStage } from '../split/manifest.js';
import { chainTable } from '../emit/table.js';
import { quantizeMultiplier, quantizeValue, type Multiplier } from '../kernels/requant.js';
import type { ConcatPart, PoolParams } from '../kernels/types.js';
import { addMultipliers } from '../kernels/eltwise.js';
import { activationTable, unaryOf, type Unary } from '../kernels/lut.js';
import { stepInputs, type Program, type ProgramStage, type Slot, type Step, type Tensor8 } from './program.js';

/** Ops whose int8 output holds input values only: bytes copied (or rescaled where the parameters differ). */
const RESHAPES = new Set(['Flatten', 'Reshape', 'Squeeze', 'Unsqueeze', 'Identity', 'Dropout']);
const f32 = Math.fround;
/** Elementwise functions of one value that run as a 256-entry table (lib/kernels/lut.ts). */
const TABLED = new Set(['Sigmoid', 'Tanh', 'HardSigmoid', 'HardSwish', 'LeakyRelu', 'Relu', 'Clip']);
const prod = (v: number[]) => v.reduce((a, b) => a * b, 1);

/**
 * How b broadcasts over the full shape (NumPy rules, as ONNX's): b's axes that are not 1 must match
 * and be one run of the full shape's axes (ignoring axes of size 1); then each b value serves the
 * values after that run. undefined: another pattern.
 */
export function broadcastOf(full: number[], b: number[]): { inner: number; bN: number } | undefined {
  if (b.length > full.length) return undefined;
  const bd = [...new Array(full.length - b.length).fill(1), ...b];
  let first = -1, last = -1;
  for (let k = 0; k < full.length; k++) {
    if (bd[k] !== 1 && bd[k] !== full[k]) return undefined;
    if (full[k] === 1 || bd[k] === 1) continue;
    if (last >= 0 && last !== k - 1 && full.slice(last + 1, k).some((d) => d !== 1)) return undefined;
    if (first < 0) first = k;
    last = k;
  }
  if (first < 0) return { inner: prod(full), bN: 1 };
  return { inner: prod(full.slice(last + 1)), bN: prod(full.slice(first, last + 1)) };
}

class StageReader {
  readonly shapes: ShapeResult;
  readonly producer = new Map<string, Node>();
  readonly consumers = new Map<string, Node[]>();
  readonly consts = new Map<string, Float32Array | Int32Array>();
  constructor(readonly model: Model, readonly file: string) {
    this.shapes = inferShapes(model, { batch: 1 });
    const g = model.graph;
    for (const n of g.nodes) for (const o of n.outputs) if (o) this.producer.set(o, n);
    for (const n of g.nodes) for (const r of readsOf(n)) { let l = this.consumers.get(r); if (!l) this.consumers.set(r, (l = [])); l.push(n); }
  }
  fail(msg: string, n?: Node): never {
    throw new OfframpError('graph', msg, this.file, n ? `node '${n.name || n.outputs[0]}' (${n.op})` : undefined);
  }
  /** Values of an initializer, or of a Mul of two (the bias scale s_x·s_w, as the QDQ pass writes it). */
  value(name: string, at: Node): Float32Array | Int32Array {
    const got = this.consts.get(name);
    if (got) return got;
    const t = this.model.graph.initializers.get(name);
    let v: Float32Array | Int32Array | undefined;
    if (t) v = t.dataType === FLOAT ? floatValues(t) : intValues(t);
    else {
      const p = this.producer.get(name);
      if (p && !p.domain && p.op === 'Mul' && p.inputs.length === 2) {
        const a = this.value(p.inputs[0], p), b = this.value(p.inputs[1], p);
        if (a instanceof Float32Array && b instanceof Float32Array && (a.length === 1 || b.length === 1 || a.length === b.length)) {
          const n = Math.max(a.length, b.length);
          v = Float32Array.from({ length: n }, (_, i) => f32(a[a.length === 1 ? 0 : i] * b[b.length === 1 ? 0 : i]));
        }
      }
    }
    if (!v) this.fail(`'${name}' is not a constant the int8 firmware can read`, at);
    this.consts.set(name, v);
    return v;
  }
  isConst(name: string): boolean {
    if (this.model.graph.initializers.has(name)) return true;
    const p = this.producer.get(name);
    return !!p && !p.domain && p.op === 'Mul' && p.inputs.every((x) => this.isConst(x));
  }
  dims(name: string, at: Node): number[] {
    const s = this.shapes.values.get(name)?.type.shape;
    if (!s || !s.every((d): d is number => typeof d === 'number')) this.fail(`'${name}' has no concrete shape`, at);
    return s as number[];
  }
  only(name: string): Node | undefined {
    const c = this.consumers.get(name) ?? [];
    return c.length === 1 ? c[0] : undefined;
  }
  /** scale and zero point of a Q or DQ node (inputs 1 and 2), per tensor. */
  qparams(n: Node): { scale: number; zeroPoint: number } {
    const s = this.value(n.inputs[1], n);
    const zName = n.inputs[2];
    const z = zName ? this.value(zName, n) : Int32Array.of(0);
    if (s.length !== 1 || z.length !== 1) this.fail('per-axis parameters on an activation: the int8 firmware needs one scale and zero point per tensor', n);
    const scale = s[0], zeroPoint = z[0];
    if (!(scale > 0) || !Number.isFinite(scale)) this.fail(`scale ${scale} must be a positive finite number`, n);
    if (!Number.isInteger(zeroPoint) || zeroPoint < -128 || zeroPoint > 127) this.fail(`zero point ${zeroPoint} is outside int8`, n);
    const zt = zName ? this.model.graph.initializers.get(zName) : undefined;
    if (zName && zt && zt.dataType !== INT8) this.fail('the int8 firmware needs int8 zero points (uint8 QDQ is not supported)', n);
    return { scale, zeroPoint };
  }
}

/** int8, int32 and int64 initializer values (raw_data or the typed field). */
function intValues(t: TensorProto): Int32Array | undefined {
  const n = tensorDims(t).reduce((a, b) => a * b, 1);
  const raw = t.rawData;
  if (t.dataType === INT8) {
    if (raw?.length) return raw.length === n ? Int32Array.from(new Int8Array(raw.buffer, raw.byteOffset, n)) : undefined;
    return t.int32Data?.length === n ? Int32Array.from(t.int32Data) : undefined;
  }
  if (t.dataType === INT64) {
    // index lists (Slice starts and ends, axes): saturated to int32, as far as any dimension reaches
    const sat = (v: bigint) => Number(v > 2147483647n ? 2147483647n : v < -2147483648n ? -2147483648n : v);
    if (raw?.length) return raw.length === 8 * n ? Int32Array.from(new BigInt64Array(Uint8Array.from(raw).buffer), sat) : undefined;
    return t.int64Data?.length === n ? Int32Array.from(t.int64Data, sat) : undefined;
  }
  if (t.dataType === INT32) {
    if (raw?.length) return raw.length === 4 * n ? new Int32Array(Uint8Array.from(raw).buffer) : undefined;
    return t.int32Data?.length === n ? Int32Array.from(t.int32Data) : undefined;
  }
  return undefined;
}

interface Activation { name: string; scale: number; zeroPoint: number }

/** Lower every stage of a quantized manifest (folder `dir`, manifest file `file` for errors). */
export function lowerChain(manifest: Manifest, dir: string, file: string): Program {
  if (!manifest.quantization) throw new OfframpError('usage', 'not a quantized folder (run offramp quantize, or build --int8)', file);
  const table = chainTable(manifest, file);
  const exitNames = [...table.exitNames, table.finalOutput];
  const handovers: Tensor8[] = [], logits: Tensor8[] = new Array(exitNames.length);
  const stages: ProgramStage[] = [];
  let input: Program['input'] | undefined;
  for (const st of manifest.stages) {
    const stageFile = path.join(dir, st.file);
    const model = loadModel(stageFile);
    const r = lowerStage(new StageReader(model, stageFile), st, exitNames, handovers, logits, file);
    if (r.input) {
      if (input) throw new OfframpError('graph', 'more than one stage quantizes a float model input: the int8 firmware takes one input', stageFile);
      input = r.input;
    }
    stages.push(r.stage);
  }
  if (!input) throw new OfframpError('graph', 'no stage quantizes the model input', file);
  exitNames.forEach((n, k) => { if (!logits[k]) throw new OfframpError('graph', `no stage makes int8 logits for ${n}`, file); });
  return {
    stages, input, handovers, logits, exitStage: table.exitStage, classes: table.classes,
    arenaBytes: Math.max(0, ...stages.map((s) => s.arenaBytes)), arenaAlign: table.arenaAlign || 16,
  };
}

function lowerStage(r: StageReader, st: ManifestStage, exitNames: string[], handovers: Tensor8[], logits: Tensor8[], manifestFile: string) {
  const g = r.model.graph;
  const at = `stages[${st.index}]`;
  const bad = (msg: string, where = at) => new OfframpError('data', msg, manifestFile, where);
  if (!st.arena) throw bad('no arena plan for the stage (quantize again with this version)');
  const arenaBytes = st.arenaBytes ?? 0;
  const planned = new Map(st.arena.buffers.map((b) => [b.name, b]));
  const graphOut = new Set(g.outputs.map((o) => o.name));
  const tensors = new Map<string, Tensor8>();
  let input: { name: string; tensor: Tensor8 } | undefined;

  const slotFor = (name: string, size: number, n: Node): Slot => {
    // `define` appends the tensor right after: its index is the next one
    if (graphOut.has(name)) return { kind: 'handover', index: handovers.length };
    // an exit's int8 logits: the value a DequantizeLinear turns into the exit output
    for (const c of r.consumers.get(name) ?? []) {
      if (!c.domain && c.op === 'DequantizeLinear' && graphOut.has(c.outputs[0])) {
        const k = exitNames.indexOf(c.outputs[0]);
        if (k >= 0) return { kind: 'logits', exit: k };
      }
    }
    const b = planned.get(name);
    if (!b) r.fail(`int8 value '${name}' has no place in the stage's arena plan (${at}.arena)`, n);
    if (b.bytes < size) throw bad(`arena buffer '${name}' holds ${b.bytes} bytes, the int8 value needs ${size}`, `${at}.arena`);
    if (b.offset + size > arenaBytes) throw bad(`arena buffer '${name}' at offset ${b.offset} runs past arenaBytes ${arenaBytes}`, `${at}.arena`);
    return { kind: 'arena', offset: b.offset };
  };
  const define = (a: Activation, n: Node): Tensor8 => {
    const shape = r.dims(a.name, n);
    const size = shape.reduce((x, y) => x * y, 1);
    const t: Tensor8 = { name: a.name, size, shape, scale: a.scale, zeroPoint: a.zeroPoint, slot: slotFor(a.name, size, n) };
    if (t.slot.kind === 'handover') handovers.push(t);
    if (t.slot.kind === 'logits') {
      if (logits[t.slot.exit]) r.fail(`two int8 values for ${exitNames[t.slot.exit]}`, n);
      logits[t.slot.exit] = t;
    }
    tensors.set(a.name, t);
    return t;
  };

  // Stage inputs: a float model input is quantized by the entry point; an int8 one is a handover.
  for (const v of g.inputs) {
    if (g.initializers.has(v.name)) continue;
    const readers = r.consumers.get(v.name) ?? [];
    if (v.type?.dtype === INT8) {
      const prior = handovers.find((h) => h.name === v.name);
      if (!prior) throw new OfframpError('graph', `int8 input '${v.name}' is handed over by no earlier stage`, r.file);
      for (const c of readers) if (c.op !== 'DequantizeLinear' || r.qparams(c).scale !== prior.scale || r.qparams(c).zeroPoint !== prior.zeroPoint)
        r.fail(`reads handover '${v.name}' with other int8 parameters than the stage that wrote it`, c);
      tensors.set(v.name, prior);
    } else if (v.type?.dtype === FLOAT) {
      const q = readers.length === 1 && readers[0].op === 'QuantizeLinear' ? readers[0] : undefined;
      if (!q) throw new OfframpError('graph', `float input '${v.name}' must be read by one QuantizeLinear`, r.file);
      const t = define({ name: q.outputs[0], ...r.qparams(q) }, q);
      input = { name: v.name, tensor: t };
    } else throw new OfframpError('graph', `input '${v.name}' is neither float32 nor int8`, r.file);
  }

  /** The int8 tensor a float activation is dequantized from. */
  const source = (name: string, n: Node): Tensor8 => {
    const p = r.producer.get(name);
    if (!p || p.domain || p.op !== 'DequantizeLinear') r.fail(`input '${name}' is not dequantized from int8: the op would run in float`, n);
    const t = tensors.get(p.inputs[0]);
    if (!t) r.fail(`int8 value '${p.inputs[0]}' is used before it is made`, p);
    const q = r.qparams(p);
    if (q.scale !== t.scale || q.zeroPoint !== t.zeroPoint) r.fail(`dequantizes '${t.name}' with other parameters than it was quantized with`, p);
    return t;
  };
  /** Follow the op's output through an optional Relu/Clip to its QuantizeLinear: the int8 output and its clamp. */
  const sink = (n: Node, k = 0): { y: Tensor8; lo: number; hi: number; consumed: Node[] } => {
    let v = n.outputs[k], lo = -128, hi = 127;
    let c = r.only(v);
    const act: Node[] = [];
    while (c && !c.domain && (c.op === 'Relu' || c.op === 'Clip') && !graphOut.has(v)) { act.push(c); v = c.outputs[0]; c = r.only(v); }
    if (c && (c.domain || c.op !== 'QuantizeLinear')) r.fail(`op ${c.domain ? `${c.domain}.` : ''}${c.op} has no int8 kernel in offramp's firmware (it reads the float output of '${n.name || n.outputs[0]}')`, c);
    if (!c || graphOut.has(v)) r.fail('output is not quantized to int8 right after the op (a float tensor between int8 kernels)', n);
    const q = r.qparams(c);
    for (const a of act) {
      if (a.op === 'Relu') lo = Math.max(lo, q.zeroPoint);
      else {
        const min = a.inputs[1] ? r.value(a.inputs[1], a) : undefined, max = a.inputs[2] ? r.value(a.inputs[2], a) : undefined;
        const am = attrsOf(a.attrs);
        const mn = min ? min[0] : am.float('min', -Infinity)!, mx = max ? max[0] : am.float('max', Infinity)!;
        if (Number.isFinite(mn)) lo = Math.max(lo, quantizeValue(mn, q.scale, q.zeroPoint));
        if (Number.isFinite(mx)) hi = Math.min(hi, quantizeValue(mx, q.scale, q.zeroPoint));
      }
    }
    const y = define({ name: c.outputs[0], ...q }, c);
    return { y, lo, hi: Math.max(lo, hi), consumed: [...act, c] };
  };

  const steps: Step[] = [];
  const node = (n: Node) => n.name || n.outputs[0];
  const handled = new Set<Node>();
  for (const i of r.shapes.order) {
    const n = g.nodes[i];
    if (handled.has(n)) continue;
    if (n.domain) r.fail(`op ${n.domain}.${n.op} has no int8 kernel`, n);
    if (n.op === 'DequantizeLinear' || n.op === 'Constant') continue;
    if (n.op === 'Mul' && n.inputs.every((x) => r.isConst(x))) continue;
    if (n.op === 'QuantizeLinear') {
      if (input && n.outputs[0] === input.tensor.name) continue;
      r.fail('quantizes a value no int8 kernel made', n);
    }
    const acts = n.inputs.filter((x) => x && !r.isConst(x) && !isWeightDq(r, x));
    if (!acts.length) r.fail('op of constants only', n);
    const x = source(acts[0], n);
    const xd = r.dims(acts[0], n);
    /** The int8 output of output k, its clamp; the activations and QuantizeLinear after it are this step's. */
    const claim = (k: number) => {
      const got = sink(n, k);
      for (const c of got.consumed) handled.add(c);
      return got;
    };
    const a = attrsOf(n.attrs);
    const multiplier = (real: number, what: string): Multiplier => {
      try { return quantizeMultiplier(real, what); } catch (e) { r.fail((e as Error).message, n); }
    };
    if (n.op === 'Split') {
      // one slice step per output: its rows of the split axis, requantized to the output's parameters
      const ax = a.int('axis', 0), axis = ax < 0 ? ax + xd.length : ax;
      if (axis < 0 || axis >= xd.length) r.fail(`axis ${ax} is outside rank ${xd.length}`, n);
      const inner = prod(xd.slice(axis + 1)), outer = prod(xd.slice(0, axis));
      let at = 0;
      n.outputs.forEach((o, k) => {
        if (!o) r.fail(`output ${k} is unnamed: the int8 firmware writes every part`, n);
        const rows = r.dims(o, n)[axis];
        const { y, lo, hi } = claim(k);
        steps.push({ node: node(n), x, y, kind: 'slice', p: {
          outer, inRow: xd[axis] * inner, start: at * inner, block: rows * inner,
          inZero: x.zeroPoint, outZero: y.zeroPoint, lo, hi, mul: multiplier(x.scale / y.scale, `requantization of part ${k}`),
          copy: x.scale === y.scale && x.zeroPoint === y.zeroPoint && lo === -128 && hi === 127,
        } });
        at += rows;
      });
      if (at !== xd[axis]) r.fail(`parts take ${at} of ${xd[axis]} rows`, n);
      continue;
    }
    const { y, lo, hi } = claim(0);
    const yd = y.shape;
    const base = { node: node(n), x, y };
    switch (n.op) {
      case 'Conv': {
        const w = weightOf(r, n, 0);
        if (xd.length !== 3 && xd.length !== 4) r.fail(`${xd.length - 2}-D convolution: the int8 firmware has 1-D and 2-D`, n);
        const two = xd.length === 4;
        const win = windowOf(a, xd.length - 2, w.dims.slice(2));
        if (!win) r.fail('kernel shape not known', n);
        const [inH, inW] = two ? [xd[2], xd[3]] : [1, xd[2]];
        const [outH, outW] = two ? [yd[2], yd[3]] : [1, yd[2]];
        const k2 = (v: number[]) => (two ? v : [1, ...v]);
        const [kH, kW] = k2(win.kernel), [sH, sW] = k2(win.strides), [dH, dW] = k2(win.dilations);
        const pads = padsOf(win, two ? [inH, inW] : [inW], two ? [outH, outW] : [outW]);
        const [pT, pL] = two ? [pads[0], pads[1]] : [0, pads[0]];
        const groups = a.int('group', 1);
        const inC = xd[1], outC = yd[1];
        if (inC % groups || outC % groups || w.dims[1] * groups !== inC || w.dims[0] !== outC) r.fail('weight shape does not match channels and groups', n);
        const bias = biasOf(r, n, x, w, 2);
        const per = w.q.length / outC;
        steps.push({ ...base, kind: 'conv', p: {
          inC, inH, inW, outC, outH, outW, kH, kW, strideH: sH, strideW: sW, dilH: dH, dilW: dW, padTop: pT, padLeft: pL, groups,
          inZero: x.zeroPoint, outZero: y.zeroPoint, lo, hi,
          weight: Int8Array.from(w.q), bias: fold(bias, w.q, per, x.zeroPoint),
          mul: Array.from(w.scale, (s, o) => multiplier(f32(x.scale * s) / y.scale, `requantization of channel ${o}`)),
        } });
        break;
      }
      case 'Gemm': case 'MatMul': {
        const gemm = n.op === 'Gemm';
        if (gemm && (a.float('alpha', 1) !== 1 || a.float('beta', 1) !== 1 || a.int('transA', 0) !== 0)) r.fail('Gemm with alpha, beta or transA: the int8 firmware has y = x·W + b', n);
        const rows = xd.slice(0, -1).reduce((p, d) => p * d, 1);
        if (rows !== 1) r.fail(`${rows} rows: the int8 firmware multiplies one row`, n);
        const transB = gemm && a.int('transB', 0) === 1;
        const w = weightOf(r, n, transB ? 0 : 1);
        if (w.dims.length !== 2) r.fail('weight is not a matrix', n);
        const [K, N] = transB ? [w.dims[1], w.dims[0]] : w.dims;
        if (K !== xd[xd.length - 1]) r.fail(`weight has ${K} rows for ${xd[xd.length - 1]} inputs`, n);
        // the kernel reads [out][in]: W as stored when transB, transposed otherwise
        const wq = transB ? Int32Array.from(w.q) : Int32Array.from({ length: K * N }, (_, i) => w.q[(i % K) * N + Math.floor(i / K)]);
        const bias = gemm ? biasOf(r, n, x, w, 2) : new Int32Array(N);
        steps.push({ ...base, kind: 'dense', p: {
          in: K, out: N, inZero: x.zeroPoint, outZero: y.zeroPoint, lo, hi,
          weight: Int8Array.from(wq), bias: fold(bias, wq, K, x.zeroPoint),
          mul: Array.from(w.scale, (s, o) => multiplier(f32(x.scale * s) / y.scale, `requantization of output ${o}`)),
        } });
        break;
      }
      case 'MaxPool': case 'AveragePool': case 'GlobalAveragePool': case 'ReduceMean': {
        if (xd.length !== 3 && xd.length !== 4) r.fail(`${xd.length}-D input: the int8 firmware pools 1-D and 2-D maps`, n);
        const two = xd.length === 4;
        const [inH, inW] = two ? [xd[2], xd[3]] : [1, xd[2]];
        const [outH, outW] = two ? [yd[2] ?? 1, yd[3] ?? 1] : [1, yd[2] ?? 1];
        let p: PoolParams;
        if (n.op === 'GlobalAveragePool' || n.op === 'ReduceMean') {
          if (n.op === 'ReduceMean') {
            const axes = n.inputs[1] ? Array.from(r.value(n.inputs[1], n)) : a.ints('axes');
            const want = two ? [2, 3] : [2];
            const norm = (axes ?? []).map((v) => (v < 0 ? v + xd.length : v)).sort();
            if (norm.join() !== want.join()) r.fail('ReduceMean over other axes than the spatial ones', n);
          }
          p = poolParams(xd[1], inH, inW, 1, 1, inH, inW, 1, 1, 1, 1, [0, 0, 0, 0], false);
        } else {
          const win = windowOf(a, xd.length - 2);
          if (!win) r.fail('kernel shape not known', n);
          const k2 = (v: number[]) => (two ? v : [1, ...v]);
          const pads = padsOf(win, two ? [inH, inW] : [inW], two ? [outH, outW] : [outW]);
          const pp = two ? pads : [0, pads[0], 0, pads[1]];
          const [kH, kW] = k2(win.kernel), [sH, sW] = k2(win.strides), [dH, dW] = k2(win.dilations);
          if (n.op === 'MaxPool' && n.outputs.length > 1 && n.outputs[1]) r.fail('MaxPool indices output: not supported', n);
          p = poolParams(xd[1], inH, inW, outH, outW, kH, kW, sH, sW, dH, dW, pp, a.int('count_include_pad', 0) === 1);
        }
        p.inZero = x.zeroPoint; p.outZero = y.zeroPoint; p.lo = lo; p.hi = hi;
        if (n.op === 'MaxPool') {
          if (x.scale !== y.scale || x.zeroPoint !== y.zeroPoint) r.fail('MaxPool output quantized with other parameters than its input', n);
          steps.push({ ...base, kind: 'maxpool', p });
        } else {
          p.mul = Array.from({ length: p.kH * p.kW + 1 }, (_, count) => (count ? multiplier(x.scale / (y.scale * count), `average over ${count}`) : { mult: 0, shift: 0 }));
          steps.push({ ...base, kind: 'avgpool', p });
        }
        break;
      }
      case 'Add': case 'Mul': case 'Sub': case 'Div': {
        if (acts.length === 1 && n.inputs.length === 2) {
          // with a float scalar constant it is a function of one value: a table (x + 3, x / 6 of a HardSwish written out)
          const k = n.inputs[0] === acts[0] ? 1 : 0, c = r.isConst(n.inputs[k]) ? r.value(n.inputs[k], n) : undefined;
          if (!(c instanceof Float32Array) || c.length !== 1) r.fail(`${n.op} with a constant operand that is not one float32 value: the int8 firmware tables a scalar constant only`, n);
          const v = c[0], first = k === 1;
          const fn: Unary = n.op === 'Add' ? (t) => f32(t + v) : n.op === 'Mul' ? (t) => f32(t * v)
            : n.op === 'Sub' ? (first ? (t) => f32(t - v) : (t) => f32(v - t)) : (first ? (t) => f32(t / v) : (t) => f32(v / t));
          steps.push({ ...base, kind: 'lut', p: { n: x.size, table: activationTable(fn, x, y, lo, hi) } });
          break;
        }
        if (n.op === 'Sub' || n.op === 'Div') r.fail(`${n.op} of two int8 tensors has no int8 kernel in offramp's firmware`, n);
        if (acts.length !== 2 || n.inputs.length !== 2) r.fail(`${n.op} with a constant operand: the int8 firmware ${n.op === 'Add' ? 'adds' : 'multiplies'} two int8 tensors`, n);
        let [ta, tb] = [x, source(n.inputs[1], n)], db = r.dims(n.inputs[1], n);
        if (ta.size !== y.size) { [ta, tb] = [tb, ta]; db = xd; }
        const bc = ta.size === y.size ? broadcastOf(yd, db) : undefined;
        if (!bc) r.fail(`broadcasts ${JSON.stringify(r.dims(n.inputs[0], n))} with ${JSON.stringify(r.dims(n.inputs[1], n))}: the int8 firmware broadcasts one operand as a scalar or along one run of axes`, n);
        const bin = { n: y.size, ...bc, aZero: ta.zeroPoint, bZero: tb.zeroPoint, outZero: y.zeroPoint, lo, hi };
        if (n.op === 'Add') {
          let m: ReturnType<typeof addMultipliers>;
          try { m = addMultipliers(ta.scale / y.scale, tb.scale / y.scale); } catch (e) { r.fail((e as Error).message, n); }
          steps.push({ ...base, x: ta, x2: tb, kind: 'add', p: { ...bin, ...m } });
        } else steps.push({ ...base, x: ta, x2: tb, kind: 'mul', p: { ...bin, mul: multiplier(f32(ta.scale * tb.scale) / y.scale, 'requantization of the product') } });
        break;
      }
      case 'Concat': {
        if (acts.length !== n.inputs.length) r.fail('Concat with a constant part: the int8 firmware concatenates int8 tensors', n);
        const xs = n.inputs.map((v) => source(v, n));
        const ax = a.int('axis', 0), axis = ax < 0 ? ax + yd.length : ax;
        if (axis < 0 || axis >= yd.length) r.fail(`axis ${ax} is outside rank ${yd.length}`, n);
        const parts: ConcatPart[] = n.inputs.map((v, k) => ({
          block: prod(r.dims(v, n).slice(axis)), inZero: xs[k].zeroPoint,
          mul: multiplier(xs[k].scale / y.scale, `requantization of part ${k}`),
          copy: xs[k].scale === y.scale && xs[k].zeroPoint === y.zeroPoint && lo === -128 && hi === 127,
        }));
        const outer = prod(yd.slice(0, axis));
        if (outer * parts.reduce((t, q) => t + q.block, 0) !== y.size) r.fail('parts do not add up to the output', n);
        steps.push({ ...base, kind: 'concat', xs, p: { outer, outZero: y.zeroPoint, lo, hi, parts } });
        break;
      }
      case 'Slice': {
        // one axis cut with step 1: the slice kernel (a Split's part) with the output's rows
        const list = (i: number, attr: string) => (n.inputs[i] ? Array.from(r.value(n.inputs[i], n)) : a.ints(attr));
        const starts = list(1, 'starts') ?? [], axes = list(3, 'axes') ?? starts.map((_, k) => k), stepsOf = n.inputs[4] ? Array.from(r.value(n.inputs[4], n)) : starts.map(() => 1);
        if (stepsOf.some((v) => v !== 1)) r.fail('Slice with steps other than 1: the int8 firmware cuts contiguous rows', n);
        const cut = xd.map((d, k) => d !== yd[k]).reduce<number[]>((l, c, k) => (c ? [...l, k] : l), []);
        if (yd.length !== xd.length || cut.length > 1) r.fail(`Slice along ${cut.length} axes: the int8 firmware cuts one`, n);
        const axis = cut[0] ?? 0, j = axes.findIndex((v) => (v < 0 ? v + xd.length : v) === axis);
        let from = j < 0 ? 0 : starts[j];
        if (from < 0) from += xd[axis];
        from = Math.max(0, Math.min(xd[axis], from));
        const inner = prod(xd.slice(axis + 1));
        if (from + yd[axis] > xd[axis]) r.fail('Slice runs past its input', n);
        steps.push({ ...base, kind: 'slice', p: {
          outer: prod(xd.slice(0, axis)), inRow: xd[axis] * inner, start: from * inner, block: yd[axis] * inner,
          inZero: x.zeroPoint, outZero: y.zeroPoint, lo, hi, mul: multiplier(x.scale / y.scale, 'requantization of the slice'),
          copy: x.scale === y.scale && x.zeroPoint === y.zeroPoint && lo === -128 && hi === 127,
        } });
        break;
      }
      case 'Transpose': {
        if (xd.length > 6) r.fail(`rank ${xd.length}: the int8 firmware transposes up to rank 6`, n);
        const perm = a.ints('perm') ?? xd.map((_, k) => xd.length - 1 - k);
        if (perm.length !== xd.length || [...perm].sort().some((v, k) => v !== k)) r.fail(`perm ${JSON.stringify(perm)} is not a permutation of ${xd.length} axes`, n);
        if (x.scale !== y.scale || x.zeroPoint !== y.zeroPoint || lo !== -128 || hi !== 127) r.fail('Transpose output quantized with other parameters than its input', n);
        const strides = xd.map((_, d) => prod(xd.slice(d + 1)));
        steps.push({ ...base, kind: 'transpose', p: { n: x.size, dims: perm.map((d) => xd[d]), strides: perm.map((d) => strides[d]) } });
        break;
      }
      default:
        if (TABLED.has(n.op)) {
          if (x.size !== y.size) r.fail(`changes the element count (${x.size} → ${y.size})`, n);
          let fn: Unary | undefined;
          if (n.op === 'Relu') fn = (v) => Math.max(0, v);
          else if (n.op === 'Clip') {
            const min = n.inputs[1] ? r.value(n.inputs[1], n)[0] : a.float('min', -Infinity)!, max = n.inputs[2] ? r.value(n.inputs[2], n)[0] : a.float('max', Infinity)!;
            fn = (v) => Math.min(max, Math.max(min, v));
          } else fn = unaryOf(n.op, { float: (k, d) => a.float(k, d)! });
          steps.push({ ...base, kind: 'lut', p: { n: x.size, table: activationTable(fn!, x, y, lo, hi) } });
          break;
        }
        if (RESHAPES.has(n.op)) {
          if (x.size !== y.size) r.fail(`changes the element count (${x.size} → ${y.size})`, n);
          if (x.scale === y.scale && x.zeroPoint === y.zeroPoint && lo === -128 && hi === 127) steps.push({ ...base, kind: 'copy', n: x.size });
          else steps.push({ ...base, kind: 'rescale', p: { n: x.size, inZero: x.zeroPoint, outZero: y.zeroPoint, lo, hi, mul: multiplier(x.scale / y.scale, 'rescale') } });
          break;
        }
        r.fail(`op ${n.op} has no int8 kernel in offramp's firmware`, n);
    }
  }
  checkLifetimes(steps, arenaBytes, r.file);
  return { stage: { index: st.index, file: st.file, steps, arenaBytes, macs: st.macs } as ProgramStage, input };
}

function poolParams(c: number, inH: number, inW: number, outH: number, outW: number, kH: number, kW: number, sH: number, sW: number, dH: number, dW: number, pads: number[], includePad: boolean): PoolParams {
  return { c, inH, inW, outH, outW, kH, kW, strideH: sH, strideW: sW, dilH: dH, dilW: dW, padTop: pads[0], padLeft: pads[1], padBottom: pads[2], padRight: pads[3], includePad, inZero: 0, outZero: 0, lo: -128, hi: 127, mul: [] };
}

/** Begin pads then end pads per spatial axis, auto_pad resolved (ONNX operator spec). */
function padsOf(win: NonNullable<ReturnType<typeof windowOf>>, ins: number[], outs: number[]): number[] {
  const n = ins.length;
  if (win.autoPad === 'NOTSET') return win.pads;
  if (win.autoPad === 'VALID') return new Array(2 * n).fill(0);
  const begin: number[] = [], end: number[] = [];
  for (let i = 0; i < n; i++) {
    const span = win.dilations[i] * (win.kernel[i] - 1) + 1;
    const total = Math.max(0, (outs[i] - 1) * win.strides[i] + span - ins[i]);
    const b = win.autoPad === 'SAME_LOWER' ? Math.ceil(total / 2) : Math.floor(total / 2);
    begin.push(b); end.push(total - b);
  }
  return [...begin, ...end];
}

function isWeightDq(r: StageReader, name: string): boolean {
  const p = r.producer.get(name);
  return !!p && !p.domain && p.op === 'DequantizeLinear' && r.isConst(p.inputs[0]);
}

/** The int8 weight of a matrix op: the DequantizeLinear at input 1, its per-channel scales (along `axis` of the stored weight). */
function weightOf(r: StageReader, n: Node, axis: number): { q: Int32Array; scale: Float32Array; dims: number[] } {
  const dq = r.producer.get(n.inputs[1]);
  if (!dq || dq.op !== 'DequantizeLinear' || !r.model.graph.initializers.has(dq.inputs[0])) r.fail('weight is not an int8 initializer behind a DequantizeLinear (a float weight would run in float)', n);
  const t = r.model.graph.initializers.get(dq.inputs[0])!;
  if (t.dataType !== INT8) r.fail('weight is not int8', dq);
  const dims = tensorDims(t);
  const q = r.value(dq.inputs[0], dq) as Int32Array;
  const scale = r.value(dq.inputs[1], dq);
  const z = dq.inputs[2] ? r.value(dq.inputs[2], dq) : new Int32Array(scale.length);
  const channels = dims[axis] ?? 1;
  const dqAxis = attrsOf(dq.attrs).int('axis', 1);
  if (scale.length !== 1 && (scale.length !== channels || (dqAxis < 0 ? dqAxis + dims.length : dqAxis) !== axis)) r.fail(`weight scales are not per output channel (${scale.length} scales, ${channels} channels)`, dq);
  if (!(scale instanceof Float32Array) || [...scale].some((s) => !(s > 0) || !Number.isFinite(s))) r.fail('weight scales must be positive finite float32 values', dq);
  if ([...z].some((v) => v !== 0)) r.fail('weight zero points must be 0 (symmetric int8 weights)', dq);
  const full = scale.length === channels ? scale : new Float32Array(channels).fill(scale[0]);
  return { q, scale: full, dims };
}

/** The int32 bias at input `at` (zeros without one); its scale must be s_x · s_w[c] as stored. */
function biasOf(r: StageReader, n: Node, x: Tensor8, w: { scale: Float32Array }, at: number): Int32Array {
  const channels = w.scale.length;
  const name = n.inputs[at];
  if (!name) return new Int32Array(channels);
  const dq = r.producer.get(name);
  if (!dq || dq.op !== 'DequantizeLinear') r.fail('bias is not an int32 initializer behind a DequantizeLinear', n);
  const t = r.model.graph.initializers.get(dq.inputs[0]);
  if (!t || t.dataType !== INT32) r.fail('bias is not int32', dq);
  const b = r.value(dq.inputs[0], dq) as Int32Array;
  if (b.length !== channels) r.fail(`bias has ${b.length} values for ${channels} output channels`, dq);
  const s = r.value(dq.inputs[1], dq);
  for (let c = 0; c < channels; c++) {
    const want = f32(x.scale * w.scale[c]);
    if (s[s.length === 1 ? 0 : c] !== want) r.fail(`bias scale ${s[s.length === 1 ? 0 : c]} of channel ${c} is not input scale × weight scale (${want})`, dq);
  }
  return b;
}

/** bias[o] − zx · Σ w[o]: padded taps read zx, so the kernels multiply raw int8 values. */
function fold(bias: Int32Array, w: ArrayLike<number>, per: number, zx: number): Int32Array {
  return Int32Array.from(bias, (b, o) => {
    let s = 0;
    for (let i = o * per; i < (o + 1) * per; i++) s += w[i];
    const v = b - zx * s;
    if (v < -2147483648 || v > 2147483647) throw new OfframpError('data', `folded bias ${v} of channel ${o} overflows int32`);
    return v;
  });
}

/** No step may write an arena buffer that a live one shares: checked on the steps as they will run (a tampered plan is refused). */
function checkLifetimes(steps: Step[], arenaBytes: number, file: string): void {
  const live: { t: Tensor8; last: number }[] = [];
  const lastUse = new Map<string, number>();
  steps.forEach((s, i) => { for (const t of stepInputs(s)) lastUse.set(t.name, i); });
  steps.forEach((s, i) => {
    const y = s.y;
    if (y.slot.kind !== 'arena') return;
    const lo = y.slot.offset, hi = lo + y.size;
    if (hi > arenaBytes) throw new OfframpError('data', `'${y.name}' at offset ${lo} runs past the arena (${arenaBytes} bytes)`, file);
    for (const l of live) {
      if (l.last < i || l.t.slot.kind !== 'arena') continue;
      const a = l.t.slot.offset, b = a + l.t.size;
      if (a < hi && lo < b) throw new OfframpError('data', `arena plan puts '${y.name}' over '${l.t.name}' while both are needed`, file, `step ${i} (${s.node})`);
    }
    live.push({ t: y, last: lastUse.get(y.name) ?? i });
  });
  // an int8 tensor no step writes (the stage's quantized input) lives from the start to its last reader
  const written = new Set(steps.map((s) => s.y.name));
  const first = steps[0]?.x;
  const unwritten = new Map(steps.flatMap((s) => stepInputs(s)).filter((t) => !written.has(t.name) && t.slot.kind === 'arena').map((t) => [t.name, t]));
  for (const t of unwritten.values()) {
    if (t.slot.kind !== 'arena') continue;
    const a = t.slot.offset, b = a + t.size, last = lastUse.get(t.name) ?? 0;
    steps.forEach((s, i) => {
      if (i > last || (i === 0 && t === first) || s.y.slot.kind !== 'arena') return;
      const lo = s.y.slot.offset, hi = lo + s.y.size;
      if (a < hi && lo < b) throw new OfframpError('data', `arena plan puts '${s.y.name}' over the stage input '${t.name}' while it is needed`, file);
    });
  }
}

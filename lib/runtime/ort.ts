// The one place that talks to onnxruntime-node. Low in the pipeline: shape
// measurement, head capture and the staged runner all sit on it.
import * as ort from 'onnxruntime-node';
// The native session onnxruntime-node's InferenceSession wraps. Its run is synchronous; the public
// wrapper defers every call to the next event-loop turn and re-checks feeds, which costs more than
// running a small stage (≈15 µs against ≈5 µs a call on a one-Relu graph; bench/chain.ts shows what
// it does to a chain). The version is pinned exactly, so this deep import cannot drift under us;
// test/chain-runner.test.ts holds it to the public API bit for bit.
import { binding, initOrt } from 'onnxruntime-node/dist/binding.js';
import type { Model, TensorType } from '../graph/ir.js';
import { modelToProto, typeToProto } from '../graph/ir.js';
import { encodeModel } from '../onnx/codec.js';
import { placeTensors } from '../onnx/external.js';
import { dtypeInfo } from '../onnx/dtype.js';
import { tensorDims } from '../onnx/tensor.js';
import type { TensorProto } from '../onnx/types.js';
import { OfframpError } from '../errors.js';

export type OrtTensor = ort.Tensor;
export type Session = ort.InferenceSession;

// One intra-op thread: results must not depend on the machine's core count (and with one thread
// there is no pool to spin or share). Runtime logging is off (fatal only): its failures come back
// as our one-line errors instead. Level 'all' matters: its blocked conv layout halves a small CNN.
const OPTIONS: ort.InferenceSession.SessionOptions = {
  intraOpNumThreads: 1, interOpNumThreads: 1, executionMode: 'sequential', graphOptimizationLevel: 'all', logSeverityLevel: 4,
};

export async function openSession(bytes: Uint8Array, file?: string): Promise<Session> {
  try {
    return await ort.InferenceSession.create(bytes, OPTIONS);
  } catch (e) {
    throw new OfframpError('runtime', `onnxruntime cannot load the model: ${firstLine(e)}`, file);
  }
}

/**
 * A session run on the caller's turn: same options, same kernels, same bits as `openSession`, without the
 * per-call hop. For runners that make many small calls in a row (the staged chain). Feeds must name
 * every input; every output comes back.
 */
export interface SyncSession {
  readonly inputNames: readonly string[];
  readonly outputNames: readonly string[];
  run(feeds: Record<string, ort.Tensor>): Record<string, ort.Tensor>;
  release(): void;
}

/**
 * Graph optimisation: 'all' for running (the blocked conv layout), 'disabled' for judging two graphs of
 * the same nodes against each other: at 'all' onnxruntime fuses a whole model and its stage files
 * differently (a residual Add into a Conv on one side only), one rounding step apart; with no fusion each
 * node runs the same kernel on both sides.
 */
export type Optimization = 'all' | 'disabled';

export function openSyncSession(bytes: Uint8Array, file?: string, optimization: Optimization = 'all'): SyncSession {
  initOrt();
  const s = new binding.InferenceSession();
  const options = optimization === 'all' ? OPTIONS : { ...OPTIONS, graphOptimizationLevel: optimization };
  try { s.loadModel(bytes.buffer as ArrayBuffer, bytes.byteOffset, bytes.byteLength, options); } catch (e) {
    throw new OfframpError('runtime', `onnxruntime cannot load the model: ${firstLine(e)}`, file);
  }
  const inputNames = s.inputMetadata.map((m) => m.name), outputNames = s.outputMetadata.map((m) => m.name);
  const fetches = Object.fromEntries(outputNames.map((n) => [n, null]));
  let released = false;
  return {
    inputNames, outputNames,
    run(feeds) {
      if (released) throw new OfframpError('runtime', 'session already released', file);
      for (const n of inputNames) if (!feeds[n]) throw new OfframpError('runtime', `input '${n}' not fed`, file);
      try { return s.run(feeds, fetches, {}) as Record<string, ort.Tensor>; } catch (e) {
        throw new OfframpError('runtime', `onnxruntime failed: ${firstLine(e)}`, file);
      }
    },
    release() { if (!released) { released = true; s.dispose(); } },
  };
}

/**
 * A model's bytes for a session: weights loaded from external data go inline (their
 * data_location cleared), so the runtime never looks for files by itself.
 */
export function modelBytes(model: Model): Uint8Array {
  return encodeModel(placeTensors(modelToProto(model)).model);
}

export const firstLine = (e: unknown) => String((e as Error)?.message ?? e).split('\n')[0];

/** A zero-filled tensor of a concrete type. */
export function zeros(t: { dtype: number; shape: number[] }): ort.Tensor {
  const name = dtypeInfo(t.dtype).ort;
  if (!name) throw new OfframpError('runtime', `element type ${dtypeInfo(t.dtype).name} is not supported by the runtime`);
  const n = t.shape.reduce((a, b) => a * b, 1);
  const data = ({
    float32: () => new Float32Array(n), float64: () => new Float64Array(n), int8: () => new Int8Array(n), uint8: () => new Uint8Array(n),
    int16: () => new Int16Array(n), uint16: () => new Uint16Array(n), int32: () => new Int32Array(n), uint32: () => new Uint32Array(n),
    int64: () => new BigInt64Array(n), uint64: () => new BigUint64Array(n), bool: () => new Uint8Array(n), float16: () => new Uint16Array(n),
    string: () => new Array<string>(n).fill(''),
  } as Record<string, () => ort.Tensor['data']>)[name]();
  return new ort.Tensor(name as ort.Tensor.Type, data as never, t.shape);
}

/**
 * Run the model once with every named value exposed as an extra output, and
 * return the concrete dims each one had. Inputs are zeros of the bound shapes
 * unless given.
 */
export async function measureShapes(
  model: Model, names: string[], inputs: Map<string, { dtype: number; shape: number[] }>, file?: string,
): Promise<Map<string, { dtype: number; shape: number[] }>> {
  const proto = modelToProto(model);
  const g = proto.graph!;
  const existing = new Set((g.output ?? []).map((o) => o.name));
  const extra = names.filter((n) => !existing.has(n));
  g.output = [...(g.output ?? []), ...extra.map((name) => ({ name }))];
  const session = await openSession(encodeModel(placeTensors(proto).model), file);
  const feeds: Record<string, ort.Tensor> = {};
  for (const [name, t] of inputs) feeds[name] = zeros(t);
  let out: ort.InferenceSession.OnnxValueMapType;
  // All outputs, not a fetch list: onnxruntime-node 1.23 answers a fetch-name array with the wrong outputs.
  try { out = await session.run(feeds); } catch (e) {
    throw new OfframpError('runtime', `onnxruntime failed while measuring shapes: ${firstLine(e)}`, file);
  } finally { await session.release(); }
  const res = new Map<string, { dtype: number; shape: number[] }>();
  for (const n of names) {
    const t = out[n] as ort.Tensor | undefined;
    if (t) res.set(n, { dtype: ortDtype(t.type), shape: [...t.dims] });
  }
  return res;
}

const ORT_TO_ONNX: Record<string, number> = {
  float32: 1, uint8: 2, int8: 3, uint16: 4, int16: 5, int32: 6, int64: 7, string: 8, bool: 9, float16: 10, float64: 11, uint32: 12, uint64: 13,
};
export const ortDtype = (t: string): number => ORT_TO_ONNX[t] ?? 0;
export { typeToProto };
export type { TensorType };

/** Run with feeds only and take every output (see measureShapes for why no fetch list). */
export async function runSession(session: Session, feeds: Record<string, ort.Tensor>, file?: string): Promise<Record<string, ort.Tensor>> {
  try { return (await session.run(feeds)) as Record<string, ort.Tensor>; } catch (e) {
    throw new OfframpError('runtime', `onnxruntime failed: ${firstLine(e)}`, file);
  }
}

type Typed = { new (n: number | ArrayBuffer): ArrayLike<number | bigint>; from(xs: ArrayLike<number | bigint>): ArrayLike<number | bigint>; BYTES_PER_ELEMENT: number };
const TYPED: Record<string, Typed> = {
  float32: Float32Array, float64: Float64Array, int8: Int8Array, uint8: Uint8Array, int16: Int16Array, uint16: Uint16Array,
  int32: Int32Array, uint32: Uint32Array, int64: BigInt64Array, uint64: BigUint64Array, bool: Uint8Array, float16: Uint16Array,
} as unknown as Record<string, Typed>;

/**
 * A TensorProto (a test_data_set .pb, an initializer) as an onnxruntime tensor.
 * Data comes from raw_data (copied: it may be an unaligned view into a file) or the typed field the spec assigns to the type.
 */
export function tensorFromProto(t: TensorProto, file?: string): ort.Tensor {
  const dt = t.dataType ?? 0;
  const name = dtypeInfo(dt).ort;
  const bad = (why: string) => new OfframpError('data', `tensor '${t.name ?? ''}': ${why}`, file);
  if (!name) throw bad(`element type ${dtypeInfo(dt).name} is not supported by the runtime`);
  const dims = tensorDims(t);
  const n = dims.reduce((a, b) => a * b, 1);
  let data: ort.Tensor['data'];
  if (name === 'string') data = (t.stringData ?? []).map((s) => new TextDecoder().decode(s));
  else {
    const C = TYPED[name];
    if (t.rawData?.length || t.dataLocation === 1) {
      const raw = t.rawData ?? new Uint8Array();
      if (raw.length !== n * C.BYTES_PER_ELEMENT) throw bad(`raw_data has ${raw.length} bytes, ${n * C.BYTES_PER_ELEMENT} expected`);
      data = new C(Uint8Array.from(raw).buffer) as unknown as ort.Tensor['data'];
    } else {
      // Typed fields by type (onnx.proto3 comments): small ints, bool and float16 bits live in int32_data.
      const field = name === 'float32' ? t.floatData : name === 'float64' ? t.doubleData : name === 'int64' ? t.int64Data
        : name === 'uint64' || name === 'uint32' ? t.uint64Data : t.int32Data;
      const xs = field ?? [];
      const big = name === 'int64' || name === 'uint64';
      data = C.from(Array.from(xs as ArrayLike<number | bigint>, (x) => (big ? BigInt(x) : Number(x)))) as unknown as ort.Tensor['data'];
    }
  }
  if (data.length !== n) throw bad(`${data.length} values for dims [${dims.join(',')}]`);
  return new ort.Tensor(name as ort.Tensor.Type, data as never, dims);
}

/** A tensor of seeded pseudo-random values: floats uniform in [-1, 1), integers 0 or 1 (safe as indices), bools either. */
export function randomTensor(t: { dtype: number; shape: number[] }, rnd: () => number): ort.Tensor {
  const z = zeros(t);
  const d = z.data as ArrayLike<unknown> & { [i: number]: unknown };
  const kind = z.type;
  for (let i = 0; i < d.length; i++) {
    const r = rnd();
    d[i] = kind === 'float32' || kind === 'float64' ? r * 2 - 1
      : kind === 'int64' || kind === 'uint64' ? BigInt(r < 0.5 ? 0 : 1)
      : kind === 'string' ? String(Math.floor(r * 10))
      : kind === 'float16' ? (r < 0.5 ? 0 : 0x3c00) : r < 0.5 ? 0 : 1;
  }
  return z;
}

/** A tensor over existing data (not copied). */
export function tensorFromData(dtype: number, shape: number[], data: ArrayBufferView): ort.Tensor {
  const name = dtypeInfo(dtype).ort;
  if (!name || name === 'string') throw new OfframpError('runtime', `element type ${dtypeInfo(dtype).name} is not supported here`);
  return new ort.Tensor(name as ort.Tensor.Type, data as never, shape);
}

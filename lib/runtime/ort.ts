// The one place that talks to onnxruntime-node. Low in the pipeline: shape
// measurement, head capture and the staged runner all sit on it.
import * as ort from 'onnxruntime-node';
import type { Model, TensorType } from '../graph/ir.js';
import { modelToProto, typeToProto } from '../graph/ir.js';
import { encodeModel } from '../onnx/codec.js';
import { dtypeInfo } from '../onnx/dtype.js';
import { OfframpError } from '../errors.js';

export type OrtTensor = ort.Tensor;
export type Session = ort.InferenceSession;

export async function openSession(bytes: Uint8Array, file?: string): Promise<Session> {
  try {
    // One intra-op thread: results must not depend on the machine's core count.
    return await ort.InferenceSession.create(bytes, { intraOpNumThreads: 1, interOpNumThreads: 1, graphOptimizationLevel: 'all', logSeverityLevel: 3 });
  } catch (e) {
    throw new OfframpError('runtime', `onnxruntime cannot load the model: ${firstLine(e)}`, file);
  }
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
  const session = await openSession(encodeModel(proto), file);
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

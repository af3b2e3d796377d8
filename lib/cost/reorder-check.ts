// The check that a reordered model computes what the original does: both run in
// onnxruntime on the same seeded inputs, and every output must match bit for bit.
import type { Model } from '../graph/ir.js';
import { modelToProto } from '../graph/ir.js';
import { encodeModel } from '../onnx/codec.js';
import { mulberry32 } from '../graph/build.js';
import { openSession, zeros, firstLine, type OrtTensor } from '../runtime/ort.js';
import { OfframpError } from '../errors.js';

export interface InputSpec { name: string; dtype: number; shape: number[] }

/** Seeded inputs: floats uniform in [-1, 1), other types zeros (indices and masks stay in range). */
export function seededInputs(inputs: InputSpec[], seed: number): Record<string, OrtTensor> {
  const rnd = mulberry32(seed);
  const feeds: Record<string, OrtTensor> = {};
  for (const i of inputs) {
    const t = zeros(i);
    if (t.data instanceof Float32Array || t.data instanceof Float64Array) for (let k = 0; k < t.data.length; k++) t.data[k] = rnd() * 2 - 1;
    feeds[i.name] = t;
  }
  return feeds;
}

async function outputsOf(m: Model, feeds: Record<string, OrtTensor>, file?: string): Promise<Map<string, Uint8Array>> {
  const s = await openSession(encodeModel(modelToProto(m)), file);
  try {
    // Feeds only, every output: onnxruntime-node 1.23 answers a fetch-name array with the wrong outputs.
    const out = await s.run(feeds);
    return new Map(Object.entries(out).map(([k, t]) => {
      const d = t.data as ArrayLike<unknown> & ArrayBufferView;
      return [k, ArrayBuffer.isView(d) ? new Uint8Array(d.buffer.slice(d.byteOffset, d.byteOffset + d.byteLength)) : new TextEncoder().encode(JSON.stringify(t.data))];
    }));
  } catch (e) {
    throw new OfframpError('runtime', `onnxruntime failed while checking the reordered model: ${firstLine(e)}`, file);
  } finally { await s.release(); }
}

/** Throws, naming the output, unless both models give identical outputs on `runs` seeded inputs. */
export async function checkSameOutputs(original: Model, reordered: Model, inputs: InputSpec[], opts: { runs?: number; seed?: number; file?: string } = {}): Promise<void> {
  for (let k = 0; k < (opts.runs ?? 2); k++) {
    const feeds = seededInputs(inputs, (opts.seed ?? 1) + k);
    const [a, b] = [await outputsOf(original, feeds, opts.file), await outputsOf(reordered, feeds, opts.file)];
    for (const [name, v] of a) {
      const w = b.get(name);
      if (!w || w.length !== v.length || v.some((x, i) => x !== w[i])) {
        throw new OfframpError('graph', `reordered model differs from the original at output '${name}' (seeded input ${k})`, opts.file);
      }
    }
  }
}

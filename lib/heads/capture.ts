// Capture: one onnxruntime pass over the calibration data with every head's
// pooled features exposed by the capture copy, so only [rows, features] tensors
// leave the runtime. Input batches are consumed one at a time.
import type { Model } from '../graph/ir.js';
import { modelToProto } from '../graph/ir.js';
import { encodeModel } from '../onnx/codec.js';
import { openSession, runSession, zeros, type OrtTensor } from '../runtime/ort.js';
import { OfframpError } from '../errors.js';
import type { Features } from '../fit/targets.js';
import { captureModel, type HeadInput } from './graft.js';

/** `rows` samples, each of the per-sample shape, row-major float32. */
export interface Batch { rows: number; data: Float32Array }

export interface CaptureOptions {
  input: string;
  /** per-sample shape (the model input without its batch dim) */
  sample: number[];
  /** the model input's batch dim when fixed: batches are padded up to it */
  fixedBatch?: number;
  /** the model output the heads learn from (logits) */
  final: string;
  file?: string;
  onBatch?: (rowsDone: number) => void;
}

export interface Captured { n: number; features: Features[]; final: Float32Array; classes: number }

/** Growing row store: chunks kept as they come, joined once at the end. */
class Rows {
  private chunks: Float32Array[] = [];
  private n = 0;
  constructor(readonly width: number) {}
  push(t: OrtTensor, rows: number, what: string, file?: string) {
    const w = t.dims.slice(1).reduce((a, b) => a * b, 1);
    if (t.type !== 'float32' || w !== this.width || t.dims[0] < rows)
      throw new OfframpError('runtime', `${what} came out as ${t.type}[${t.dims.join(', ')}], expected float32[${rows}, ${this.width}]`, file);
    this.chunks.push((t.data as Float32Array).slice(0, rows * w));
    this.n += rows;
  }
  join(): Float32Array {
    const out = new Float32Array(this.n * this.width);
    let o = 0;
    for (const c of this.chunks) { out.set(c, o); o += c.length; }
    this.chunks = [];
    return out;
  }
}

export async function captureFeatures(model: Model, heads: (HeadInput & { width: number })[], classes: number, batches: Iterable<Batch>, o: CaptureOptions): Promise<Captured> {
  const cap = captureModel(model, heads);
  const session = await openSession(encodeModel(modelToProto(cap.model)), o.file);
  const per = o.sample.reduce((a, b) => a * b, 1);
  const stores = heads.map((h) => new Rows(h.width));
  const final = new Rows(classes);
  let n = 0;
  try {
    for (const b of batches) {
      if (b.data.length !== b.rows * per) throw new OfframpError('data', `batch of ${b.rows} rows holds ${b.data.length} values, ${b.rows * per} expected`, o.file);
      const feedRows = o.fixedBatch ?? b.rows;
      // A fixed batch dim: feed it in slices of that size, the last one zero-padded.
      for (let at = 0; at < b.rows; at += feedRows) {
        const rows = Math.min(feedRows, b.rows - at);
        const x = zeros({ dtype: 1, shape: [feedRows, ...o.sample] });
        (x.data as Float32Array).set(b.data.subarray(at * per, (at + rows) * per));
        const out = await runSession(session, { [o.input]: x }, o.file);
        cap.features.forEach((f, k) => stores[k].push(out[f], rows, `features of cut '${heads[k].cut}'`, o.file));
        final.push(out[o.final], rows, `output '${o.final}'`, o.file);
        n += rows;
      }
      o.onBatch?.(n);
    }
  } finally { await session.release(); }
  return { n, features: stores.map((s, k) => ({ X: s.join(), n, d: heads[k].width })), final: final.join(), classes };
}

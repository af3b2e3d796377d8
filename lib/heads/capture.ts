// Capture: one onnxruntime pass over the calibration data with every head's
// pooled features exposed by the capture copy, so only [rows, features] tensors
// leave the runtime. Input batches are consumed one at a time.
import type { Model } from '../graph/ir.js';
import { modelBytes, openSession } from '../runtime/ort.js';
import { forEachBatch, RowStore, type Batch } from '../runtime/batches.js';
import type { Features } from '../fit/targets.js';
import { captureModel, type HeadInput } from './graft.js';

export type { Batch } from '../runtime/batches.js';

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

export async function captureFeatures(model: Model, heads: (HeadInput & { width: number })[], classes: number, batches: Iterable<Batch>, o: CaptureOptions): Promise<Captured> {
  const cap = captureModel(model, heads);
  const session = await openSession(modelBytes(cap.model), o.file);
  const stores = heads.map((h) => new RowStore(h.width));
  const final = new RowStore(classes);
  let n = 0;
  try {
    n = await forEachBatch(session, batches, o, (out, rows) => {
      cap.features.forEach((f, k) => stores[k].push(out[f], rows, `features of cut '${heads[k].cut}'`, o.file));
      final.push(out[o.final], rows, `output '${o.final}'`, o.file);
    }, o.onBatch);
  } finally { await session.release(); }
  return { n, features: stores.map((s, k) => ({ X: s.join(), n, d: heads[k].width })), final: final.join(), classes };
}

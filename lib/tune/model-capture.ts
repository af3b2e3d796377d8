// The exit cache of a grafted model (one file, before splitting): one runtime pass with every
// exit output and the final output gathered as rows, in exit order.
import type { Model } from '../graph/ir.js';
import { modelBytes, openSession } from '../runtime/ort.js';
import { forEachBatch, RowStore } from '../runtime/batches.js';
import { completeShapes } from '../cost/analyze.js';
import { classifierIO, type DataSource } from '../heads/fit-heads.js';
import { exitRecords, type ExitRecord } from '../heads/graft.js';
import { OfframpError } from '../errors.js';
import { makeCache, type ExitCache } from './cache.js';

export interface CapturedExits { cache: ExitCache; exits: ExitRecord[]; classes: number }

export async function captureExits(
  model: Model & { file?: string }, data: DataSource, labels?: Int32Array, onBatch?: (done: number) => void,
): Promise<CapturedExits> {
  const exits = exitRecords(model).sort((a, b) => a.exit - b.exit);
  if (!exits.length) throw new OfframpError('graph', 'the model has no exit heads (graft them first)', model.file);
  const io = classifierIO(model, await completeShapes(model, { batch: 1 }));
  const k = io.classes, slots = exits.length + 1;
  const stores = [...exits.map(() => new RowStore(k)), new RowStore(k)];
  const names = [...exits.map((e) => e.output), io.final];
  const session = await openSession(modelBytes(model), model.file);
  let n = 0;
  try {
    n = await forEachBatch(session, data.batches(io.fixedBatch ?? 64), { ...io, file: model.file }, (out, rows) => {
      names.forEach((name, s) => stores[s].push(out[name], rows, `output '${name}'`, model.file));
    }, onBatch);
  } finally { await session.release(); }
  if (labels && labels.length !== n) throw new OfframpError('data', `${labels.length} labels for ${n} samples`, model.file);
  // Interleave to the cache layout [sample × slot × class].
  const cols = stores.map((s) => s.join());
  const logits = new Float32Array(n * slots * k);
  for (let i = 0; i < n; i++) for (let s = 0; s < slots; s++) logits.set(cols[s].subarray(i * k, (i + 1) * k), (i * slots + s) * k);
  return { cache: makeCache(n, exits.length, k, logits, labels), exits, classes: k };
}

/** The cache restricted to some exits (ascending slot indices), the final output kept last. */
export function selectExits(c: ExitCache, keep: number[]): ExitCache {
  const slots = c.exits + 1, k = c.classes, out = keep.length + 1;
  const logits = new Float32Array(c.samples * out * k);
  for (let i = 0; i < c.samples; i++) {
    [...keep, c.exits].forEach((s, j) => logits.set(c.logits.subarray((i * slots + s) * k, (i * slots + s + 1) * k), (i * out + j) * k));
  }
  return { ...c, exits: keep.length, logits };
}

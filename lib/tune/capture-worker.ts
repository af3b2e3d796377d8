// One capture thread (chain-capture.ts captureThreaded): its own chain over the caller's manifest, a
// contiguous range of rows, the logits handed back as a transferred buffer.
import { parentPort, workerData } from 'node:worker_threads';
import { OfframpError } from '../errors.js';
import { openChain } from '../run/chain.js';
import type { Manifest } from '../split/manifest.js';
import { captureRows, chainLayout, type CaptureMessage } from './chain-capture.js';
import type { Optimization } from '../runtime/ort.js';

const w = workerData as { manifest: Manifest; file: string; optimization: Optimization; data: string; from: number; to: number };
const post = (m: CaptureMessage, transfer?: ArrayBuffer[]) => parentPort!.postMessage(m, transfer);
try {
  const chain = openChain(w.manifest, w.file, { optimization: w.optimization });
  try {
    const logits = await captureRows(chain, chainLayout(chain.manifest, chain.dir), w.data, w.from, w.to, (done) => post({ done }));
    post({ logits }, [logits.buffer as ArrayBuffer]);
  } finally { await chain.release(); }
} catch (e) {
  post({ error: e instanceof OfframpError ? { kind: e.kind, message: e.message, file: e.file, where: e.where } : { message: e instanceof Error ? e.message : String(e) } });
}

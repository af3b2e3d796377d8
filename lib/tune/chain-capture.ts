// The capture pass over a split: every sample through the staged chain once,
// keeping each exit's logits and the final output's in an ExitCache. Also what
// the tuner needs from the manifest: exits in order, the final output, costs per exit.
import os from 'node:os';
import path from 'node:path';
import { Worker } from 'node:worker_threads';
import { OfframpError, type ErrorKind } from '../errors.js';
import { MANIFEST_FILE } from '../split/manifest.js';
import { npyBatches, readDataHeader, sampleShape, toFloat32 } from '../data/npy.js';
import { tensorFromData, type OrtTensor } from '../runtime/ort.js';
import type { Chain } from '../run/chain.js';
import type { Manifest } from '../split/manifest.js';
import { makeCache, type ExitCache, type ExitCosts } from './cache.js';
import { compiledModule } from '../util/shipped.js';

export interface ChainLayout {
  /** exit output names, in the order the chain makes them */
  exits: string[];
  /** stage making each exit */
  exitStage: number[];
  /** the model's own output (the classifier's logits) */
  final: string;
  classes: number;
  /** per exit (final last), with heads counted inside their stages */
  costs: ExitCosts;
  /** the model input fed */
  input: string;
}

const width = (shape: (number | string)[]) => shape.slice(1).reduce<number>((a, d) => a * (typeof d === 'number' ? d : NaN), 1);

/** What replay and the tuner read from a manifest: exits in chain order, the final output, classes, MACs per exit. */
export function chainLayout(m: Manifest, file?: string): ChainLayout {
  const exits: string[] = [], exitStage: number[] = [];
  for (const s of m.stages) for (const e of s.exits) { exits.push(e); exitStage.push(s.index); }
  if (!exits.length) throw new OfframpError('data', 'the split has no exit outputs (graft exit heads before splitting)', file);
  const finals = m.outputs.filter((o) => !exits.includes(o.name));
  if (finals.length !== 1) throw new OfframpError('data', `expected one model output besides the exits, found ${finals.length} (${finals.map((o) => o.name).join(', ')})`, file);
  const classes = width(finals[0].shape);
  if (!Number.isInteger(classes) || classes < 1) throw new OfframpError('data', `the final output '${finals[0].name}' has no fixed class count (shape [${finals[0].shape.join(', ')}])`, file);
  for (const e of exits) {
    const t = m.outputs.find((o) => o.name === e);
    if (t && width(t.shape) !== classes) throw new OfframpError('data', `exit '${e}' has ${width(t.shape)} values per sample, the final output ${classes}`, file);
  }
  if (m.inputs.length !== 1) throw new OfframpError('data', `the chain has ${m.inputs.length} inputs; tuning feeds one`, file);
  const stage: number[] = [];
  let from = 0;
  for (const s of [...exitStage, m.stages.length - 1]) {
    let macs = 0;
    for (let i = from; i <= s; i++) macs += m.stages[i].macs;
    stage.push(macs);
    from = s + 1;
  }
  return { exits, exitStage, final: finals[0].name, classes, costs: { stage, head: exits.map(() => 0) }, input: m.inputs[0].name };
}

export { readLabels } from '../data/labels.js';

/** Frames of a .npy as batch-1 tensors for the chain's input, one at a time: `limit` of them from row `from`. */
export function* frames(m: Manifest, file: string, limit = Infinity, from = 0): Generator<OrtTensor> {
  const t = m.inputs[0];
  const shape = [1, ...sampleShape(readDataHeader(file), t.shape, file)];
  if (t.dtype !== 'float32') throw new OfframpError('data', `the chain input '${t.name}' is ${t.dtype}; tuning feeds float32`, file);
  let n = 0;
  const to = Number.isFinite(limit) ? from + limit : undefined;
  for (const b of npyBatches(file, 256, { from, to })) {
    const x = toFloat32(b.data), per = x.length / b.rows;
    for (let r = 0; r < b.rows && n < limit; r++, n++) yield tensorFromData(1, shape, x.slice(r * per, (r + 1) * per));
  }
}

/** Copy one sample's logits of an output into `out` at `off`, checking the width. */
export function copyLogits(t: OrtTensor | undefined, name: string, classes: number, out: Float32Array, off: number): void {
  if (!t || t.type !== 'float32' || t.size !== classes) throw new OfframpError('runtime', `output '${name}' came out as ${t ? `${t.type}[${t.dims.join(', ')}]` : 'nothing'}, expected float32 with ${classes} values`);
  out.set(t.data as Float32Array, off);
}

/**
 * Rows from … to − 1 of `data` through the whole chain, one at a time: their logits laid out as an ExitCache's.
 * `onProgress` hears the rows done so far, every 100 and at the end.
 */
export async function captureRows(chain: Chain, layout: ChainLayout, data: string, from: number, to: number, onProgress?: (n: number) => void): Promise<Float32Array> {
  const E = layout.exits.length, C = layout.classes, names = [...layout.exits, layout.final];
  const logits = new Float32Array((to - from) * (E + 1) * C);
  let i = 0;
  for (const x of frames(chain.manifest, data, to - from, from)) {
    const r = await chain.run({ [layout.input]: x });
    names.forEach((nm, k) => copyLogits(r.outputs[nm], nm, C, logits, (i * (E + 1) + k) * C));
    i++;
    if (onProgress && (i % 100 === 0 || i === to - from)) onProgress(i);
  }
  return logits;
}

export interface CaptureOptions {
  /**
   * Worker threads, each with its own chain (single-threaded sessions, as the caller's) running one contiguous
   * range of rows; the logits are the same bits whatever the count. Default: one per core
   * (os.availableParallelism()), fewer for a short file (MIN_ROWS_PER_THREAD each); 1: this thread, no worker.
   */
  threads?: number;
  /** Without `threads`: at most this many (in place of the core count), still MIN_ROWS_PER_THREAD each. */
  maxThreads?: number;
}

/** Below this many rows a thread of its own costs more (onnxruntime and the stages load in each) than it saves. */
export const MIN_ROWS_PER_THREAD = 2000;

/** Run every sample of `data` through the whole chain; labels (when given) must count as many rows. */
export async function captureCache(chain: Chain, data: string, labels?: Int32Array, onProgress?: (n: number) => void, o: CaptureOptions = {}): Promise<{ cache: ExitCache; layout: ChainLayout; threads: number }> {
  const layout = chainLayout(chain.manifest, chain.dir);
  const rows = readDataHeader(data).rows;
  if (labels && labels.length !== rows) throw new OfframpError('data', `${labels.length} labels for ${rows} samples`, data);
  for (const [k, v] of [['threads', o.threads], ['maxThreads', o.maxThreads]] as const) {
    if (v !== undefined && !(Number.isInteger(v) && v >= 1)) throw new OfframpError('usage', `${k}: a whole number ≥ 1, not ${v}`);
  }
  const threads = Math.max(1, Math.min(o.threads ?? Math.min(o.maxThreads ?? os.availableParallelism(), Math.floor(rows / MIN_ROWS_PER_THREAD)), rows));
  const worker = threads > 1 ? compiledModule(import.meta.url, 'tune/capture-worker.js') : undefined;
  const logits = worker ? await captureThreaded(chain, layout, data, rows, threads, worker, onProgress) : await captureRows(chain, layout, data, 0, rows, onProgress);
  return { cache: makeCache(rows, layout.exits.length, layout.classes, logits, labels), layout, threads: worker ? threads : 1 };
}

/** What a capture worker posts: progress, its logits (transferred), or the error it stopped on. */
export type CaptureMessage = { done: number } | { logits: Float32Array } | { error: { kind: ErrorKind; message: string; file?: string; where?: string } | { message: string } };

async function captureThreaded(chain: Chain, layout: ChainLayout, data: string, rows: number, threads: number, file: URL, onProgress?: (n: number) => void): Promise<Float32Array> {
  const width = (layout.exits.length + 1) * layout.classes;
  const bounds = Array.from({ length: threads + 1 }, (_, w) => Math.round((w * rows) / threads));
  const done = new Array<number>(threads).fill(0);
  let reported = 0;
  const parts = await Promise.all(bounds.slice(0, -1).map((from, w) => new Promise<Float32Array | Error>((resolve) => {
    const to = bounds[w + 1];
    const wk = new Worker(file, { workerData: { manifest: chain.manifest, file: path.join(chain.dir, MANIFEST_FILE), optimization: chain.optimization, data, from, to } });
    let result: Float32Array | Error = new OfframpError('runtime', `capture worker for rows ${from}…${to - 1} stopped without an answer`, data);
    wk.on('message', (m: CaptureMessage) => {
      if ('done' in m) {
        done[w] = m.done;
        const n = done.reduce((a, b) => a + b, 0);
        if (onProgress && (n - reported >= 100 || n === rows)) { reported = n; onProgress(n); }
      } else if ('logits' in m) result = m.logits;
      else result = 'kind' in m.error ? new OfframpError(m.error.kind, m.error.message, m.error.file, m.error.where) : new Error(m.error.message);
    });
    wk.on('error', (e) => { result = e; });
    wk.on('exit', () => resolve(result));
  })));
  // the first failing range's error: the row a single thread would have stopped on
  const failed = parts.find((p): p is Error => p instanceof Error);
  if (failed) throw failed;
  const logits = new Float32Array(rows * width);
  parts.forEach((p, w) => logits.set(p as Float32Array, bounds[w] * width));
  return logits;
}

// Chain against source: run both on the same inputs and measure the differences
// per output. Integers must match exactly; floats within a relative tolerance,
// magnitudes below 1 compared as 1 (so values near zero are held to rtol absolute).
import { loadModel } from '../graph/io.js';
import { modelBytes, openSyncSession, randomTensor, tensorFromData, type OrtTensor } from '../runtime/ort.js';
import { mulberry32 } from '../graph/build.js';
import { dtypeByName } from '../onnx/dtype.js';
import { halfToNumber, npyBatches, readNpyHeader, sampleShape, toFloat32 } from '../data/npy.js';
import { OfframpError } from '../errors.js';
import { readRegular } from '../util/fsx.js';
import type { Chain } from './chain.js';
import type { ManifestTensor } from '../split/manifest.js';

export interface Diff { name: string; dtype: string; elements: number; maxAbs: number; maxRel: number; mismatched: number; ok: boolean; note?: string }
export interface Tolerance { /** relative tolerance for floats (default 1e-5) */ rtol?: number }

const FLOATS = new Set(['float32', 'float64', 'float16']);

/** Differences of `got` from `want`, elementwise. */
export function diffTensors(name: string, got: OrtTensor | undefined, want: OrtTensor, tol: Tolerance = {}): Diff {
  const rtol = tol.rtol ?? 1e-5;
  const base = { name, dtype: want.type, elements: want.size, maxAbs: 0, maxRel: 0, mismatched: 0 };
  if (!got) return { ...base, mismatched: want.size, ok: false, note: 'missing' };
  if (got.type !== want.type || got.dims.join() !== want.dims.join()) {
    return { ...base, mismatched: want.size, ok: false, note: `got ${got.type}[${got.dims.join(',')}], want ${want.type}[${want.dims.join(',')}]` };
  }
  const a = got.data as ArrayLike<number | bigint | string>, b = want.data as ArrayLike<number | bigint | string>;
  const float = FLOATS.has(want.type);
  const conv = want.type === 'float16' ? (x: unknown) => halfToNumber(x as number) : (x: unknown) => Number(x);
  let maxAbs = 0, maxRel = 0, bad = 0;
  for (let i = 0; i < b.length; i++) {
    if (typeof b[i] === 'string' || typeof b[i] === 'bigint') { if (a[i] !== b[i]) { bad++; maxAbs = Math.max(maxAbs, typeof b[i] === 'bigint' ? Math.abs(Number((a[i] as bigint) - (b[i] as bigint))) : 1); } continue; }
    const x = conv(a[i]), y = conv(b[i]);
    if (Number.isNaN(x) || Number.isNaN(y)) { if (Number.isNaN(x) !== Number.isNaN(y)) { bad++; maxAbs = Infinity; maxRel = Infinity; } continue; }
    if (x === y) continue;
    const d = Math.abs(x - y);
    const r = d / Math.max(Math.abs(y), 1);
    if (d > maxAbs) maxAbs = d;
    if (r > maxRel) maxRel = r;
    if (!float || !(r <= rtol)) bad++;
  }
  maxRel = Number.isFinite(maxRel) ? maxRel : Infinity;
  return { ...base, maxAbs, maxRel, mismatched: bad, ok: bad === 0 };
}

/** Fold per-sample diffs of one output into one row: worst values, mismatch counts added up. */
export function mergeDiffs(rows: Diff[]): Diff {
  return rows.reduce((acc, d) => ({
    ...acc, elements: acc.elements + d.elements, maxAbs: Math.max(acc.maxAbs, d.maxAbs), maxRel: Math.max(acc.maxRel, d.maxRel),
    mismatched: acc.mismatched + d.mismatched, ok: acc.ok && d.ok, note: acc.note ?? d.note,
  }));
}

export type Sample = Record<string, OrtTensor>;

/** `n` samples of seeded random inputs (sample i uses seed + i), shaped as the split planned them. */
export function randomSamples(inputs: ManifestTensor[], n: number, seed = 1): Sample[] {
  return Array.from({ length: n }, (_, k) => {
    const rnd = mulberry32((seed + k) >>> 0);
    return Object.fromEntries(inputs.map((t) => {
      const dtype = dtypeByName(t.dtype)?.id;
      if (!dtype || !t.shape.every((d) => typeof d === 'number')) throw new OfframpError('usage', `model input '${t.name}' has no concrete type (${t.dtype}[${t.shape.join(',')}]); give --data`);
      return [t.name, randomTensor({ dtype, shape: t.shape as number[] }, rnd)];
    }));
  });
}

/**
 * Samples from .npy files, one per model input ([N, ...] rows, one row per sample,
 * fed with batch 1), the first `n` rows.
 */
export function npySamples(inputs: ManifestTensor[], files: Record<string, string>, n: number): Sample[] {
  const per = inputs.map((t) => {
    const file = files[t.name];
    if (!file) throw new OfframpError('usage', `no --data for model input '${t.name}'`);
    const h = readNpyHeader(file);
    const shape = [1, ...sampleShape(h, t.shape, file)];
    const rows: OrtTensor[] = [];
    // rows read a block at a time (one read per row cost more than running a small chain on it)
    for (const b of npyBatches(file, Math.max(1, Math.min(n, 256)))) {
      if (rows.length >= n) break;
      const want = dtypeByName(t.dtype)?.id ?? 0;
      // Float models take any numeric data as float32; other inputs need the data's own type.
      const data = want === 1 ? toFloat32(b.data) : b.data;
      if (want !== 1 && h.dtype !== want) throw new OfframpError('data', `data is ${h.descr}, model input '${t.name}' is ${t.dtype}`, file);
      const per = data.length / b.rows;
      for (let r = 0; r < b.rows && rows.length < n; r++) rows.push(tensorFromData(want, shape, data.slice(r * per, (r + 1) * per)));
    }
    return { name: t.name, rows };
  });
  const count = Math.min(...per.map((p) => p.rows.length));
  return Array.from({ length: count }, (_, k) => Object.fromEntries(per.map((p) => [p.name, p.rows[k]])));
}

export interface CheckResult { samples: number; diffs: Diff[]; ok: boolean }

/** Run the source model and the chain on each sample; `see` gets each source output the chain also made. */
async function runBoth(chain: Chain, modelFile: string, samples: Sample[], see: (name: string, got: OrtTensor | undefined, want: OrtTensor) => void): Promise<void> {
  readRegular(modelFile, 'model');
  // Loaded by offramp, external data included (confined to the model's folder), then given inline;
  // the runner's own session kind: same options and kernels as the awaited API, without its per-call hop.
  // At the chain's own optimisation level: judged with fusion off, both sides run the same kernel per node.
  const session = openSyncSession(modelBytes(loadModel(modelFile)), modelFile, chain.optimization ?? 'all');
  try {
    for (const s of samples) {
      const want = session.run(s);
      const got = await chain.run(s);
      for (const o of chain.manifest.outputs) if (want[o.name]) see(o.name, got.outputs[o.name], want[o.name]);
    }
  } finally { session.release(); }
}

/** Run the source model and the chain on each sample; compare every source output. */
export async function checkChain(chain: Chain, modelFile: string, samples: Sample[], tol: Tolerance = {}): Promise<CheckResult> {
  const rows = new Map<string, Diff[]>();
  await runBoth(chain, modelFile, samples, (name, got, want) => {
    let l = rows.get(name); if (!l) rows.set(name, (l = []));
    l.push(diffTensors(name, got, want, tol));
  });
  const diffs = [...rows.values()].map(mergeDiffs);
  return { samples: samples.length, diffs, ok: diffs.every((d) => d.ok) };
}

/** One output of a quantized chain against the float model: same top-1 class, and how far the logits moved. */
export interface Agreement {
  name: string; samples: number;
  /** samples whose top-1 class (first maximum, per row) is the model's */
  agree: number; agreement: number;
  maxAbs: number;
  /** the largest error in units of the output's int8 step, where the manifest gives it */
  maxSteps?: number;
  ok: boolean; note?: string;
}
export interface AgreementResult { samples: number; outputs: Agreement[]; minAgreement: number; ok: boolean }

const argmax = (d: ArrayLike<number>, from: number, n: number) => {
  let best = from;
  for (let i = from + 1; i < from + n; i++) if (d[i] > d[best]) best = i;
  return best - from;
};

/**
 * A quantized chain is not bit-exact, so it is judged as classifiers are: per output, the share of samples
 * whose top-1 class matches the float model's (the last dim is the classes), and the largest logit error.
 * Fails where an output is missing or misshapen, or agrees on less than `minAgreement` of the samples.
 */
export async function checkAgreement(chain: Chain, modelFile: string, samples: Sample[], minAgreement = 0): Promise<AgreementResult> {
  const rows = new Map<string, Agreement>();
  await runBoth(chain, modelFile, samples, (name, got, want) => {
    let a = rows.get(name);
    if (!a) rows.set(name, (a = { name, samples: 0, agree: 0, agreement: 0, maxAbs: 0, ok: true }));
    if (!got || got.type !== want.type || got.dims.join() !== want.dims.join() || want.type !== 'float32') {
      a.ok = false; a.note ??= got ? `got ${got.type}[${got.dims.join(',')}], want ${want.type}[${want.dims.join(',')}]` : 'missing';
      a.samples++;
      return;
    }
    const g = got.data as Float32Array, w = want.data as Float32Array, c = Number(want.dims.at(-1) ?? 1) || 1;
    for (let r = 0; r < w.length / c; r++) { a.samples++; if (argmax(g, r * c, c) === argmax(w, r * c, c)) a.agree++; }
    for (let i = 0; i < w.length; i++) { const d = Math.abs(g[i] - w[i]); if (!(d <= a.maxAbs)) a.maxAbs = d; }
  });
  const outputs = [...rows.values()].map((a) => {
    const q = chain.manifest.outputs.find((o) => o.name === a.name)?.quant;
    const agreement = a.samples ? a.agree / a.samples : 0;
    return { ...a, agreement, ...(q && { maxSteps: a.maxAbs / q.scale }), ok: a.ok && agreement >= minAgreement };
  });
  return { samples: samples.length, outputs, minAgreement, ok: outputs.every((a) => a.ok) };
}

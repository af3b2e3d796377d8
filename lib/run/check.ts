// Chain against source: run both on the same inputs and measure the differences
// per output. Integers must match exactly; floats within a relative tolerance,
// magnitudes below 1 compared as 1 (so values near zero are held to rtol absolute).
import fs from 'node:fs';
import { openSyncSession, randomTensor, tensorFromData, type OrtTensor } from '../runtime/ort.js';
import { mulberry32 } from '../graph/build.js';
import { dtypeByName } from '../onnx/dtype.js';
import { halfToNumber, npyBatches, readNpyHeader, sampleShape, toFloat32 } from '../data/npy.js';
import { OfframpError } from '../errors.js';
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

/** Run the source model and the chain on each sample; compare every source output. */
export async function checkChain(chain: Chain, modelFile: string, samples: Sample[], tol: Tolerance = {}): Promise<CheckResult> {
  let bytes: Buffer;
  try { bytes = fs.readFileSync(modelFile); } catch { throw new OfframpError('io', 'no such file', modelFile); }
  // the runner's own session kind: same options and kernels as the awaited API, without its per-call hop
  const session = openSyncSession(bytes, modelFile);
  const rows = new Map<string, Diff[]>();
  try {
    for (const s of samples) {
      const want = session.run(s);
      const got = await chain.run(s);
      for (const o of chain.manifest.outputs) {
        if (!want[o.name]) continue;
        let l = rows.get(o.name); if (!l) rows.set(o.name, (l = []));
        l.push(diffTensors(o.name, got.outputs[o.name], want[o.name], tol));
      }
    }
  } finally { session.release(); }
  const diffs = [...rows.values()].map(mergeDiffs);
  return { samples: samples.length, diffs, ok: diffs.every((d) => d.ok) };
}

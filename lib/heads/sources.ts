// Calibration data as a DataSource: a .npy file read in row batches, or a folder
// of TensorProto files (test_data_set_*/input_0.pb), one set at a time.
import fs from 'node:fs';
import type { Dim } from '../graph/ir.js';
import { checkFinite, npyBatches, readDataHeader, sampleShape, toFloat32 } from '../data/npy.js';
import { listDataSets, readTensorFile, setFiles, type PbTensor } from '../data/pbdir.js';
import { OfframpError } from '../errors.js';
import { fsError } from '../util/fsx.js';
import type { Batch } from './capture.js';
import type { DataSource } from './fit-heads.js';

export function npySource(file: string, modelInput: readonly Dim[]): DataSource {
  const h = readDataHeader(file);
  sampleShape(h, modelInput, file);
  return {
    rows: h.rows,
    *batches(b) { for (const x of npyBatches(file, b)) yield { rows: x.rows, data: toFloat32(x.data) }; },
  };
}

const pbFloat = (t: PbTensor): Float32Array => (t.data instanceof Float32Array ? t.data : toFloat32(t.data as never));

/** Each set's input_0.pb is one sample (the per-sample shape) or a batch of them ([B, …sample]). */
export function pbSource(dir: string, sample: readonly number[]): DataSource {
  const sets = listDataSets(dir), per = sample.reduce((a, b) => a * b, 1);
  const rowsOf = (t: PbTensor, file: string): number => {
    const same = (a: readonly number[]) => a.length === sample.length && a.every((d, i) => d === sample[i]);
    if (same(t.dims)) return 1;
    if (same(t.dims.slice(1))) return t.dims[0];
    throw new OfframpError('data', `tensor dims [${t.dims.join(', ')}] do not match the model input [N, ${sample.join(', ')}]`, file);
  };
  const first = (set: string) => { const f = setFiles(set)[0]; if (!f) throw new OfframpError('data', 'no input_0.pb', set); return f; };
  const rows = sets.reduce((a, s) => { const f = first(s); return a + rowsOf(readTensorFile(f), f); }, 0);
  if (!rows) throw new OfframpError('data', 'holds no samples (0 rows)', dir);
  return {
    rows,
    *batches(b): Generator<Batch> {
      let buf: Float32Array[] = [], n = 0;
      for (const s of sets) {
        const f = first(s), t = readTensorFile(f), r = rowsOf(t, f), x = pbFloat(t);
        checkFinite(x, r, 0, f);
        for (let at = 0; at < r; at++) {
          buf.push(x.subarray(at * per, (at + 1) * per)); n++;
          if (n === b) { yield join(buf, n, per); buf = []; n = 0; }
        }
      }
      if (n) yield join(buf, n, per);
    },
  };
}

function join(parts: Float32Array[], rows: number, per: number): Batch {
  const data = new Float32Array(rows * per);
  parts.forEach((p, i) => data.set(p, i * per));
  return { rows, data };
}

/** Integer labels [N] from a .npy file. */
export { readLabels } from '../data/labels.js';

export function dataSource(path: string, modelInput: readonly Dim[], sample: readonly number[]): DataSource {
  let st: fs.Stats | undefined;
  try { st = fs.statSync(path, { throwIfNoEntry: false }); } catch (e) { throw fsError(e, path); }
  return st?.isDirectory() ? pbSource(path, sample) : npySource(path, modelInput);
}

// Class labels (and segment ids): a .npy of N whole numbers ([N] or [N, 1]); any integer type, or floats
// holding whole numbers. Checked here, against the file's own rows, so an error names the file and row.
import { readNpy } from './npy.js';
import { OfframpError } from '../errors.js';

export interface LabelExpect {
  /** rows the labels must count (the data's), and the data file they belong to */
  rows?: number; of?: string;
  /** class count: labels must lie in 0 … classes−1 */
  classes?: number;
  /** 'segment id': any int32, compared for equality only */
  what?: 'label' | 'segment id' | 'recording id';
}

const INT32 = 2 ** 31;

/** Class labels from a .npy of whole numbers ([N] or [N, 1]), checked against `rows` and `classes`. */
export function readLabels(file: string, x: LabelExpect = {}): Int32Array {
  const what = x.what ?? 'label';
  const { header, data } = readNpy(file);
  if (header.shape.length < 1 || header.shape.length > 2 || (header.shape.length === 2 && header.shape[1] !== 1))
    throw new OfframpError('data', `${what}s must be [N] or [N, 1] whole numbers, not shape [${header.shape.join(', ')}]`, file);
  // float16 arrives as raw bits; as labels it can only be a mistake.
  if (data instanceof Uint16Array && header.descr.endsWith('f2')) throw new OfframpError('data', `${what}s must be whole numbers, got ${header.descr}`, file);
  if (x.rows !== undefined && data.length !== x.rows)
    throw new OfframpError('data', `${data.length} ${what}s for ${x.rows} rows${x.of ? ` of ${x.of}` : ''}`, file);
  const [lo, hi] = what === 'label' ? [0, x.classes ?? INT32] : [-INT32, INT32];
  const out = new Int32Array(data.length);
  for (let i = 0; i < data.length; i++) {
    // Number() of an int64 past 2^53 rounds, but stays a whole number far outside any range below.
    const v = Number(data[i]);
    const bad = (msg: string) => new OfframpError('data', msg, file, `row ${i}`);
    if (!Number.isInteger(v)) throw bad(`${what} ${v} is not a whole number`);
    if (v < lo || v >= hi) {
      const shown = typeof data[i] === 'bigint' ? String(data[i]) : String(v);
      throw bad(x.classes !== undefined && what === 'label'
        ? `label ${shown} is outside 0..${x.classes - 1} (the model has ${x.classes} classes)`
        : `${what} ${shown} is outside ${lo}..${hi - 1}`);
    }
    out[i] = v;
  }
  return out;
}

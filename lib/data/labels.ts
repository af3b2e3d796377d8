// Class labels: a .npy of N whole numbers ([N] or [N, 1]); any integer type, or floats holding whole numbers.
import { readNpy } from './npy.js';
import { OfframpError } from '../errors.js';

export function readLabels(file: string): Int32Array {
  const { header, data } = readNpy(file);
  if (header.shape.length < 1 || header.shape.length > 2 || (header.shape.length === 2 && header.shape[1] !== 1))
    throw new OfframpError('data', `labels must be [N] or [N, 1] whole numbers, not shape [${header.shape.join(', ')}]`, file);
  // float16 arrives as raw bits; as labels it can only be a mistake.
  if (data instanceof Uint16Array && header.descr.endsWith('f2')) throw new OfframpError('data', `labels must be whole numbers, got ${header.descr}`, file);
  const out = new Int32Array(data.length);
  for (let i = 0; i < data.length; i++) {
    const v = Number(data[i]);
    if (!Number.isInteger(v)) throw new OfframpError('data', `label ${v} is not a whole number`, file, `row ${i}`);
    out[i] = v;
  }
  return out;
}

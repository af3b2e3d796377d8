// One data file serving two purposes: even rows fit the heads, odd rows tune the
// policy, so thresholds are never chosen on the rows a head was fitted on.
import type { DataSource } from '../heads/fit-heads.js';

export function rowsOfParity(src: DataSource, sample: readonly number[], parity: 0 | 1): DataSource {
  const per = sample.reduce((a, b) => a * b, 1);
  return {
    rows: Math.floor((src.rows + 1 - parity) / 2),
    *batches(rows) {
      let at = 0;
      for (const b of src.batches(rows * 2)) {
        const keep: number[] = [];
        for (let i = 0; i < b.rows; i++) if ((at + i) % 2 === parity) keep.push(i);
        at += b.rows;
        if (!keep.length) continue;
        const data = new Float32Array(keep.length * per);
        keep.forEach((i, j) => data.set(b.data.subarray(i * per, (i + 1) * per), j * per));
        yield { rows: keep.length, data };
      }
    },
  };
}

export const labelsOfParity = (y: Int32Array, parity: 0 | 1): Int32Array => y.filter((_, i) => i % 2 === parity);

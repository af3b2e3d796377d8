// Feeding row batches through a session: a model input of fixed batch size is fed
// in slices of that size (the last zero-padded), and outputs are gathered as rows.
import { runSession, zeros, type OrtTensor, type Session } from './ort.js';
import { OfframpError } from '../errors.js';

/** `rows` samples, each of the per-sample shape, row-major float32. */
export interface Batch { rows: number; data: Float32Array }

export interface FeedSpec {
  input: string;
  /** per-sample shape (the model input without its batch dim) */
  sample: number[];
  /** the model input's batch dim when fixed */
  fixedBatch?: number;
  file?: string;
}

/** Run every batch; `use` sees each slice's outputs and how many of its rows are real. Returns the rows fed. */
export async function forEachBatch(
  session: Session, batches: Iterable<Batch>, o: FeedSpec,
  use: (out: Record<string, OrtTensor>, rows: number) => void, onBatch?: (rowsDone: number) => void,
): Promise<number> {
  const per = o.sample.reduce((a, b) => a * b, 1);
  let n = 0;
  for (const b of batches) {
    if (b.data.length !== b.rows * per) throw new OfframpError('data', `batch of ${b.rows} rows holds ${b.data.length} values, ${b.rows * per} expected`, o.file);
    const feedRows = o.fixedBatch ?? b.rows;
    for (let at = 0; at < b.rows; at += feedRows) {
      const rows = Math.min(feedRows, b.rows - at);
      const x = zeros({ dtype: 1, shape: [feedRows, ...o.sample] });
      (x.data as Float32Array).set(b.data.subarray(at * per, (at + rows) * per));
      use(await runSession(session, { [o.input]: x }, o.file), rows);
      n += rows;
    }
    onBatch?.(n);
  }
  return n;
}

/** Growing row store: chunks kept as they come, joined once at the end. */
export class RowStore {
  private chunks: Float32Array[] = [];
  private n = 0;
  constructor(readonly width: number) {}
  push(t: OrtTensor, rows: number, what: string, file?: string): void {
    const w = t.dims.slice(1).reduce((a, b) => a * b, 1);
    if (t.type !== 'float32' || w !== this.width || t.dims[0] < rows)
      throw new OfframpError('runtime', `${what} came out as ${t.type}[${t.dims.join(', ')}], expected float32[${rows}, ${this.width}]`, file);
    this.chunks.push((t.data as Float32Array).slice(0, rows * w));
    this.n += rows;
  }
  join(): Float32Array {
    const out = new Float32Array(this.n * this.width);
    let o = 0;
    for (const c of this.chunks) { out.set(c, o); o += c.length; }
    this.chunks = [];
    return out;
  }
}

// Activation ranges from calibration data: a running min/max per tensor, then
// (for percentile and mse) a histogram over that range, and the range each
// method picks from them. Pure numbers.
import { activationParams, INT8_MAX, INT8_MIN, roundHalfEven } from './linear.js';

export type CalibrationMethod = 'minmax' | 'percentile' | 'mse';
export const CALIBRATION_METHODS: readonly CalibrationMethod[] = ['minmax', 'percentile', 'mse'];
/** Share of values kept inside the range by `percentile`, at each end (common practice: 99.99 %). */
export const DEFAULT_PERCENTILE = 99.99;
export const HISTOGRAM_BINS = 2048;

export class RangeObserver {
  min = Infinity;
  max = -Infinity;
  count = 0;
  add(x: ArrayLike<number>): void {
    let lo = this.min, hi = this.max;
    for (let i = 0; i < x.length; i++) { const v = x[i]; if (v < lo) lo = v; if (v > hi) hi = v; }
    this.min = lo; this.max = hi; this.count += x.length;
  }
}

/** Counts over `bins` equal bins spanning [lo, hi] (a degenerate range is one point). */
export class Histogram {
  readonly counts: Float64Array;
  constructor(readonly lo: number, readonly hi: number, bins = HISTOGRAM_BINS) { this.counts = new Float64Array(bins); }
  add(x: ArrayLike<number>): void {
    const n = this.counts.length, w = (this.hi - this.lo) / n;
    for (let i = 0; i < x.length; i++) {
      const b = w > 0 ? Math.floor((x[i] - this.lo) / w) : 0;
      this.counts[b < 0 ? 0 : b >= n ? n - 1 : b]++;
    }
  }
  centre(b: number): number { return this.lo + (b + 0.5) * ((this.hi - this.lo) / this.counts.length); }
}

/**
 * The p-th and (100 − p)-th percentiles, to within a bin: the edges of the bins holding the order
 * statistics at ranks (1 − p/100)·(n − 1) and p/100·(n − 1) (NumPy's percentile interpolates between
 * neighbours of those ranks).
 */
export function percentileRange(h: Histogram, p: number): [number, number] {
  const total = h.counts.reduce((a, b) => a + b, 0);
  const n = h.counts.length, w = (h.hi - h.lo) / n;
  const binOf = (rank: number) => { let acc = 0; for (let b = 0; b < n; b++) { acc += h.counts[b]; if (acc > rank) return b; } return n - 1; };
  // Ranks rounded towards the middle, with slack for the rounding of p/100.
  const lo = h.lo + binOf(Math.ceil((1 - p / 100) * (total - 1) - 1e-9)) * w;
  const hi = h.lo + (binOf(Math.floor((p / 100) * (total - 1) + 1e-9)) + 1) * w;
  return [Math.min(lo, h.hi), Math.max(Math.min(hi, h.hi), h.lo)];
}

/** Expected squared error of int8 quantize-dequantize of the histogram's values over a range. */
function rangeError(h: Histogram, lo: number, hi: number): number {
  const { scale, zeroPoint } = activationParams(lo, hi);
  let err = 0;
  for (let b = 0; b < h.counts.length; b++) {
    const c = h.counts[b];
    if (!c) continue;
    const x = h.centre(b);
    const q = Math.min(INT8_MAX, Math.max(INT8_MIN, roundHalfEven(x / scale) + zeroPoint));
    const d = (q - zeroPoint) * scale - x;
    err += c * d * d;
  }
  return err;
}

/**
 * The range with the least expected quantization error (squared, over the histogram): each end
 * shrunk independently towards 0 over a grid of 1, 63/64, …, 1/8 of the observed extreme.
 */
export function mseRange(h: Histogram): [number, number] {
  const fractions = Array.from({ length: 57 }, (_, k) => 1 - k / 64);
  const los = h.lo < 0 ? fractions.map((f) => h.lo * f) : [h.lo];
  const his = h.hi > 0 ? fractions.map((f) => h.hi * f) : [h.hi];
  let best: [number, number] = [h.lo, h.hi], bestErr = Infinity;
  for (const lo of los) for (const hi of his) {
    const e = rangeError(h, lo, hi);
    if (e < bestErr) { bestErr = e; best = [lo, hi]; }
  }
  return best;
}

export function chooseRange(method: CalibrationMethod, r: RangeObserver, h?: Histogram, percentile = DEFAULT_PERCENTILE): [number, number] {
  if (method === 'minmax' || !h) return [r.min, r.max];
  return method === 'percentile' ? percentileRange(h, percentile) : mseRange(h);
}

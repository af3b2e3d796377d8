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

/** Lower and upper edges holding all but (100 − p)% of the values at each end. */
export function percentileRange(h: Histogram, p: number): [number, number] {
  const total = h.counts.reduce((a, b) => a + b, 0);
  const tail = total * (1 - p / 100);
  const n = h.counts.length, w = (h.hi - h.lo) / n;
  let acc = 0, lo = h.lo, hi = h.hi;
  for (let b = 0; b < n; b++) { acc += h.counts[b]; if (acc > tail) { lo = h.lo + b * w; break; } }
  acc = 0;
  for (let b = n - 1; b >= 0; b--) { acc += h.counts[b]; if (acc > tail) { hi = h.lo + (b + 1) * w; break; } }
  return [Math.min(lo, h.hi), Math.max(hi, h.lo)];
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

// Sliding-window arithmetic shared by Conv-like and pooling rules: output
// spatial sizes from kernel, strides, dilations, pads and auto_pad (ONNX
// operator spec, Conv/MaxPool/AveragePool "output_spatial_shape").
import type { Dim } from '../graph/ir.js';
import type { Attrs } from './rule.js';
import { isNum } from './rule.js';

export interface Window { kernel: number[]; strides: number[]; dilations: number[]; pads: number[]; autoPad: string }

/** Window attributes over `n` spatial dims; kernel from the attribute, else from `kernelFallback` (a weight's dims). */
export function windowOf(a: Attrs, n: number, kernelFallback?: Dim[]): Window | undefined {
  const kernel = a.ints('kernel_shape') ?? (kernelFallback?.every(isNum) ? (kernelFallback as number[]) : undefined);
  if (!kernel || kernel.length !== n) return undefined;
  const ones = new Array<number>(n).fill(1);
  const pads = a.ints('pads', new Array<number>(2 * n).fill(0));
  if (pads.length !== 2 * n) throw new RangeError(`pads has ${pads.length} entries, want ${2 * n}`);
  // 'SAME' and legacy lowercase spellings appear in old exports; the spec's names are upper case.
  const autoPad = a.str('auto_pad', 'NOTSET').toUpperCase();
  return { kernel, strides: a.ints('strides', ones), dilations: a.ints('dilations', ones), pads, autoPad };
}

const cdiv = (a: number, b: number) => Math.ceil(a / b);

/**
 * Output size of one spatial axis. `ceil` is pooling's ceil_mode: a window
 * that would start inside the end padding is dropped (as the spec's reference
 * and common runtimes do), so every window touches real input or begin padding.
 */
export function windowOut(x: Dim, w: Window, i: number, ceil: boolean, fresh: () => string): Dim {
  const k = w.kernel[i], s = w.strides[i], d = w.dilations[i];
  const span = d * (k - 1) + 1;
  if (!isNum(x)) {
    // A symbolic size survives only when the window cannot change it.
    const same = w.autoPad === 'SAME_UPPER' || w.autoPad === 'SAME_LOWER';
    if (s === 1 && (same || (span === 1 && w.pads[i] + w.pads[i + w.kernel.length] === 0))) return x;
    return fresh();
  }
  if (w.autoPad === 'SAME_UPPER' || w.autoPad === 'SAME_LOWER') return cdiv(x, s);
  if (w.autoPad === 'VALID') return Math.max(0, cdiv(x - span + 1, s));
  const pb = w.pads[i], pe = w.pads[i + w.kernel.length];
  const room = x + pb + pe - span;
  if (room < 0) throw new RangeError(`window ${span} exceeds padded input ${x + pb + pe}`);
  let out = (ceil ? cdiv(room, s) : Math.floor(room / s)) + 1;
  if (ceil && (out - 1) * s >= x + pb) out--;
  return out;
}

/** Spatial output sizes for an N×C×spatial input. */
export const spatialOut = (xs: Dim[], w: Window, ceil: boolean, fresh: () => string): Dim[] =>
  xs.map((x, i) => windowOut(x, w, i, ceil, fresh));

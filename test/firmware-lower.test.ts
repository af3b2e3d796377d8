// Pieces of the lowering to the int8 firmware checked on their own. Broadcasting: ONNX's
// multidirectional broadcasting is NumPy's (ONNX docs, Broadcasting.md): shapes aligned at the right,
// an axis of size 1 stretched; b's value for each output index is b at that index with its stretched
// axes at 0. broadcastOf's (inner, bN) must give the same b value for every output index, or refuse.
// Add's fixed-point sum against the real formula of DequantizeLinear → Add → QuantizeLinear (ONNX
// operator definitions: (q − z)·s, then round half to even).
import { describe, it, expect } from 'vitest';
import { broadcastOf } from '../lib/firmware/lower.js';
import { mulberry32 } from '../lib/graph/build.js';
import { add, addMultipliers } from '../lib/kernels/eltwise.js';
import { roundEven } from '../lib/kernels/requant.js';

/** b's flat index for output flat index i, by the broadcasting definition itself. */
function direct(full: number[], b: number[], i: number): number {
  const bd = [...new Array(full.length - b.length).fill(1), ...b];
  let rest = i, at = 0, stride = 1;
  const idx = new Array(full.length);
  for (let k = full.length - 1; k >= 0; k--) { idx[k] = rest % full[k]; rest = Math.floor(rest / full[k]); }
  for (let k = full.length - 1; k >= 0; k--) { at += (bd[k] === 1 ? 0 : idx[k]) * stride; stride *= bd[k]; }
  return at;
}

describe('broadcastOf', () => {
  it('worked cases: per channel, scalar, same shape, trailing axes; two separate runs refused', () => {
    expect(broadcastOf([1, 8, 6, 6], [1, 8, 1, 1])).toEqual({ inner: 36, bN: 8 });
    expect(broadcastOf([1, 8, 6, 6], [8, 1, 1])).toEqual({ inner: 36, bN: 8 });
    expect(broadcastOf([1, 8, 6, 6], [])).toEqual({ inner: 288, bN: 1 });
    expect(broadcastOf([1, 8, 6, 6], [1])).toEqual({ inner: 288, bN: 1 });
    expect(broadcastOf([1, 8, 6, 6], [1, 8, 6, 6])).toEqual({ inner: 1, bN: 288 });
    expect(broadcastOf([1, 8, 6, 6], [6])).toEqual({ inner: 1, bN: 6 });
    expect(broadcastOf([1, 8, 6, 6], [1, 8, 6, 1])).toEqual({ inner: 6, bN: 48 });
    expect(broadcastOf([1, 8, 6, 6], [1, 8, 1, 6])).toBeUndefined();
    expect(broadcastOf([1, 8, 6, 6], [1, 4, 1, 1])).toBeUndefined();
    expect(broadcastOf([8, 6], [1, 8, 6])).toBeUndefined();
  });

  it('gives the broadcasting definition\'s b index for every output value of 500 random shape pairs, or refuses', () => {
    const rnd = mulberry32(19);
    let taken = 0, refused = 0;
    for (let t = 0; t < 500; t++) {
      const full = Array.from({ length: 1 + Math.floor(rnd() * 4) }, () => 1 + Math.floor(rnd() * 4));
      const b = full.slice(Math.floor(rnd() * (full.length + 1))).map((d) => (rnd() < 0.4 ? 1 : d));
      const got = broadcastOf(full, b);
      const n = full.reduce((x, y) => x * y, 1), bN = b.reduce((x, y) => x * y, 1);
      if (!got) {
        // refused only where no (inner, bN) walk gives the definition's indices
        refused++;
        for (let inner = 1; inner <= n; inner++) {
          let all = true;
          for (let i = 0; i < n && all; i++) all = Math.floor(i / inner) % bN === direct(full, b, i);
          expect(all, `${full} with ${b}: inner ${inner} would do`).toBe(false);
        }
        continue;
      }
      taken++;
      expect(got.bN).toBe(b.reduce((x, y) => x * y, 1));
      for (let i = 0; i < n; i++) expect(Math.floor(i / got.inner) % got.bN, `${full} with ${b} at ${i}`).toBe(direct(full, b, i));
    }
    console.log(`broadcastOf: ${taken} shape pairs lowered, each index equal to the definition's; ${refused} refused, none of which one walk could serve`);
    expect(taken).toBeGreaterThan(300);
  });
});

describe("Add's fixed-point sum", () => {
  it('is round((a − za)·ra + (b − zb)·rb) + zy, ties to even (ONNX QuantizeLinear rounding), except within its stated bound of a half step', () => {
    // the real-number formula the QDQ pattern DequantizeLinear → Add → QuantizeLinear defines, in double precision
    const rnd = mulberry32(23);
    let values = 0, near = 0;
    for (let t = 0; t < 300; t++) {
      const ra = 10 ** (rnd() * 3 - 2), rb = t % 5 === 0 ? 2 ** -Math.floor(rnd() * 4) : ra * 10 ** (rnd() * 2 - 1);
      const m = addMultipliers(ra, rb);
      const za = Math.floor(rnd() * 256) - 128, zb = Math.floor(rnd() * 256) - 128, zy = Math.floor(rnd() * 256) - 128;
      const bound = 255 * 2 ** -m.shift;
      expect(bound).toBeLessThanOrEqual(255 * 2 ** -20 * Math.max(ra, rb) + 1e-15);
      const a = Int8Array.from({ length: 256 }, (_, i) => i - 128), b = Int8Array.from({ length: 256 }, () => Math.floor(rnd() * 256) - 128);
      const y = new Int8Array(256);
      add({ n: 256, inner: 1, bN: 256, aZero: za, bZero: zb, outZero: zy, lo: -128, hi: 127, ...m }, a, b, y);
      for (let i = 0; i < 256; i++) {
        const real = (a[i] - za) * ra + (b[i] - zb) * rb, frac = real - Math.floor(real);
        const want = Math.max(-128, Math.min(127, roundEven(real) + zy));
        values++;
        if (Math.abs(frac - 0.5) <= bound) { near++; expect(Math.abs(y[i] - want)).toBeLessThanOrEqual(1); continue; }
        expect(y[i], `ra ${ra} rb ${rb} a ${a[i]} b ${b[i]}`).toBe(want);
      }
    }
    console.log(`Add: ${values - near} of ${values} sums equal to the real formula rounded to even; ${near} within the bound of a half step (a step apart at most)`);
  });
});

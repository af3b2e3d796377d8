// int8 Add, Mul and table lookups: the reference of offramp_eltwise.c (same sums, same rounding).
import { OfframpError } from '../errors.js';
import { toInt8 } from './requant.js';
import type { AddParams, BinaryParams, LutParams, MulParams } from './types.js';

/** Add's multipliers stay below 2^21 and its exponent at most 31: (a − za)·multA + (b − zb)·multB and the rounding nudge then fit int32 (C). */
export const ADD_MULT_BITS = 21, ADD_MAX_SHIFT = 31;

/**
 * The two multipliers of an Add at one common exponent: multA = round(ra · 2^shift), multB likewise,
 * shift as large as keeps both below 2^21 (at most 31). |a − za|, |b − zb| ≤ 255, so the sum stays below
 * 2^30 and is rounded once, in 32-bit arithmetic on the device. The multipliers' own rounding moves a
 * result by at most 255 · 2^-shift ≤ 255 · 2^-20 · max(ra, rb) of a step (2.4·10^-4 for scales alike).
 */
export function addMultipliers(ra: number, rb: number, what = 'Add'): { multA: number; multB: number; shift: number } {
  for (const r of [ra, rb]) if (!Number.isFinite(r) || r < 0) throw new OfframpError('data', `${what}: multiplier ${r} is not a finite non-negative number`);
  const big = Math.max(ra, rb), top = 2 ** ADD_MULT_BITS;
  let shift = ADD_MAX_SHIFT;
  while (shift > 1 && Math.round(big * 2 ** shift) >= top) shift--;
  if (Math.round(big * 2 ** shift) >= top) throw new OfframpError('data', `${what}: multiplier ${big} is too large for a fixed-point requantization (2^20 or more)`);
  return { multA: Math.round(ra * 2 ** shift), multB: Math.round(rb * 2 ** shift), shift };
}

/**
 * round(acc / 2^e), ties to even, for an integer |acc| < 2^52 and e in 1 … 62. acc / 2^e and q are exact;
 * so is r = acc − q·2^e, except when q = −1 and 2^e > 2^52, and then r ≥ 2^e − |acc| lies far above the
 * half step whatever its rounding.
 */
export function roundShift(acc: number, e: number): number {
  const p = 2 ** e, q = Math.floor(acc / p), r = acc - q * p, half = p / 2;
  return r > half || (r === half && q % 2 !== 0) ? q + 1 : q;
}

/** The index of b for each value of a (offramp_eltwise.c walks the same pattern without division). */
function bIndex(p: BinaryParams, i: number): number { return Math.floor(i / p.inner) % p.bN; }

export function add(p: AddParams, a: Int8Array, b: Int8Array, y: Int8Array): void {
  for (let i = 0; i < p.n; i++) {
    const acc = (a[i] - p.aZero) * p.multA + (b[bIndex(p, i)] - p.bZero) * p.multB;
    const v = roundShift(acc, p.shift) + p.outZero;
    y[i] = v < p.lo ? p.lo : v > p.hi ? p.hi : v;
  }
}

export function mul(p: MulParams, a: Int8Array, b: Int8Array, y: Int8Array): void {
  for (let i = 0; i < p.n; i++) y[i] = toInt8((a[i] - p.aZero) * (b[bIndex(p, i)] - p.bZero), p.mul, p.outZero, p.lo, p.hi);
}

export function lut(p: LutParams, x: Int8Array, y: Int8Array): void {
  for (let i = 0; i < p.n; i++) y[i] = p.table[x[i] + 128];
}

// .npy reader/writer against numpy itself: the fixtures and expected.json were
// written by numpy 1.24 (scripts/make-npy-fixtures.py); numpy's header layout is
// the reference for writeNpy's bytes.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { describe, it, expect } from 'vitest';
import { readNpyHeader, readNpy, npyBatches, toFloat32, writeNpy, sampleShape, npyHeaderBytes, type NpyArray } from '../lib/data/npy.js';
import { OfframpError } from '../lib/errors.js';
import { FLOAT, DOUBLE, INT64, INT32, UINT8, INT8, FLOAT16, BOOL } from '../lib/onnx/dtype.js';

const DIR = path.join(path.dirname(new URL(import.meta.url).pathname), 'fixtures', 'npy');
const fx = (name: string) => path.join(DIR, `${name}.npy`);
interface Exp { descr: string; shape: number[]; fortran: boolean; version: [number, number]; values?: (number | string)[] }
const EXPECTED = (JSON.parse(fs.readFileSync(path.join(DIR, 'expected.json'), 'utf8')) as { files: Record<string, Exp> }).files;
const ONNX: Record<string, number> = { f4: FLOAT, f8: DOUBLE, i8: INT64, i4: INT32, u1: UINT8, i1: INT8, f2: FLOAT16, b1: BOOL };
const tmp = () => fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-npy-'));

/** Expected values in the array's own terms: bigint for i8, float16 and float32 rounded, NaN/inf spelled out. */
function want(e: Exp): (number | bigint)[] {
  return e.values!.map((v) => {
    if (e.descr === '<i8') return BigInt(v);
    const x = v === 'nan' ? NaN : v === 'inf' ? Infinity : v === '-inf' ? -Infinity : Number(v);
    return e.descr === '<f4' || e.descr === '<f2' ? Math.fround(x) : x;
  });
}

function errorOf(f: () => unknown): OfframpError {
  try { f(); } catch (e) { expect(e).toBeInstanceOf(OfframpError); return e as OfframpError; }
  throw new Error('expected an error');
}
function expectRefusal(file: string, f: () => unknown, re: RegExp) {
  const e = errorOf(f);
  expect(e.line()).toMatch(re);
  expect(e.line()).toContain(file);
  expect(e.line()).not.toContain('\n');
}

describe('npy reader against numpy-written files', () => {
  const valued = Object.entries(EXPECTED).filter(([, e]) => e.values);
  it.each(valued)('%s: header and values', (name, e) => {
    const { header, data } = readNpy(fx(name));
    expect(header.descr).toBe(e.descr);
    expect(header.shape).toEqual(e.shape);
    expect(header.version).toEqual(e.version);
    expect(header.fortran).toBe(false);
    expect(header.dtype).toBe(ONNX[e.descr.slice(1)]);
    expect(header.rows).toBe(e.shape.length ? e.shape[0] : 1);
    expect(header.dataOffset % 64).toBe(0); // numpy aligns data to 64 bytes
    expect(readNpyHeader(fx(name))).toEqual(header);
    const got = e.descr === '<f2' ? Array.from(toFloat32(data)) : Array.from(data as ArrayLike<number | bigint>);
    expect(got).toEqual(want(e)); // toEqual: NaN equals NaN, -0 is checked by Object.is
  });

  it('float16 decodes subnormals, inf and NaN; ints and doubles convert to float32', () => {
    const f2 = toFloat32(readNpy(fx('f2')).data);
    expect(f2[5]).toBe(Math.fround(5.960464477539063e-8)); // smallest subnormal, 2^-24 (IEEE 754 binary16)
    expect(Object.is(f2[1], -0)).toBe(true);
    expect(f2[4]).toBe(65504); // largest finite half
    expect(Array.from(toFloat32(readNpy(fx('i4')).data)).slice(0, 2)).toEqual([-2147483648, 2147483648]);
    expect(toFloat32(readNpy(fx('i8')).data)[1]).toBe(Math.fround(2 ** 63));
    expect(Array.from(toFloat32(readNpy(fx('u1')).data)).slice(0, 4)).toEqual([0, 1, 127, 128]);
    const f4 = readNpy(fx('f4')).data;
    expect(toFloat32(f4)).toBe(f4);
  });

  it('batches cover every row once, in order, with fresh buffers', () => {
    const h = readNpyHeader(fx('i4_rows'));
    expect(h.shape).toEqual([1000, 3]);
    const seen: number[] = [];
    let prev: NpyArray | undefined;
    for (const b of npyBatches(fx('i4_rows'), 64)) {
      expect(b.shape).toEqual([b.rows, 3]);
      expect(b.data.length).toBe(b.rows * 3);
      expect(b.start).toBe(seen.length / 3);
      seen.push(...Array.from(b.data as Int32Array));
      if (prev) expect(b.data.buffer).not.toBe(prev.buffer);
      prev = b.data;
    }
    expect(seen).toEqual(Array.from({ length: 3000 }, (_, i) => i * 7 - 500)); // the fixture's formula
    expect([...npyBatches(fx('i4_rows'), 1000)].length).toBe(1);
    expect([...npyBatches(fx('i4_rows'), 999)].map((b) => b.rows)).toEqual([999, 1]);
    expect([...npyBatches(fx('u1_empty'), 8)]).toEqual([]);
    const l = [...npyBatches(fx('labels_i8'), 10)];
    expect(l.map((b) => b.rows)).toEqual([10, 10, 10, 7]);
    expect(l.flatMap((b) => Array.from(b.data as BigInt64Array, Number))).toEqual(Array.from({ length: 37 }, (_, i) => i % 10));
    const s = [...npyBatches(fx('f4_0d'), 4)];
    expect(s.length).toBe(1);
    expect(s[0].shape).toEqual([]);
    expect(Array.from(s[0].data as Float32Array)).toEqual([2.5]);
  });

  it('batch reading holds one batch, not the file: each batch owns a buffer of its own size', () => {
    // Memory as such is measured in `npm run bench`; here the structure that bounds it.
    const d = tmp(), f = path.join(d, 'big.npy');
    const rows = 65536, cols = 1024; // float32: 256 MiB of data
    const head = npyHeaderBytes('<f4', [rows, cols]);
    fs.writeFileSync(f, head);
    fs.truncateSync(f, head.length + rows * cols * 4); // sparse: zeros cost no disk
    let seen = 0, largest = 0;
    for (const b of npyBatches(f, 256)) { seen += b.rows; largest = Math.max(largest, b.data.buffer.byteLength); }
    expect(seen).toBe(rows);
    expect(largest).toBeLessThanOrEqual(256 * cols * 4);
    fs.rmSync(d, { recursive: true });
  });

  it('refuses what it cannot read with one line naming the file', () => {
    expectRefusal(fx('fortran'), () => readNpy(fx('fortran')), /Fortran-order/);
    expectRefusal(fx('big_endian'), () => readNpyHeader(fx('big_endian')), /big-endian.*>f4/);
    expectRefusal(fx('object'), () => readNpy(fx('object')), /object arrays/);
    expectRefusal(fx('unicode'), () => readNpy(fx('unicode')), /unsupported dtype <U2/);
    expectRefusal(fx('complex'), () => readNpy(fx('complex')), /unsupported dtype <c8/);
    expectRefusal(fx('structured'), () => readNpy(fx('structured')), /structured/);
    expectRefusal(fx('fortran'), () => [...npyBatches(fx('fortran'), 2)], /Fortran-order/);
    const d = tmp();
    const cut = path.join(d, 'cut.npy');
    const full = fs.readFileSync(fx('i4_rows'));
    fs.writeFileSync(cut, full.subarray(0, full.length - 5));
    expectRefusal(cut, () => readNpyHeader(cut), /truncated: header promises 12128 bytes/);
    expectRefusal(cut, () => [...npyBatches(cut, 64)], /truncated/);
    fs.writeFileSync(cut, full.subarray(0, 40));
    expectRefusal(cut, () => readNpy(cut), /truncated \.npy header/);
    const bad = path.join(d, 'bad.npy');
    fs.writeFileSync(bad, Buffer.from('PK\x03\x04 this is a zip'));
    expectRefusal(bad, () => readNpy(bad), /bad magic/);
    fs.writeFileSync(bad, Buffer.concat([Buffer.from([0x93]), Buffer.from('NUMPY'), Buffer.from([4, 0, 0, 0])]));
    expectRefusal(bad, () => readNpy(bad), /format version 4\.0/);
    const none = path.join(d, 'none.npy');
    expectRefusal(none, () => readNpy(none), /no such file/);
    fs.rmSync(d, { recursive: true });
  });
});

describe('npy writer', () => {
  // Same array, same bytes as numpy's write_array (bool is written as u1, so b1 is left out).
  const same = Object.entries(EXPECTED).filter(([n, e]) => e.values && e.version[0] === 1 && e.descr !== '|b1');
  it.each(same)('%s: byte-identical to numpy', (name) => {
    const d = tmp(), out = path.join(d, 'w.npy');
    const { header, data } = readNpy(fx(name));
    writeNpy(out, data, header.shape);
    expect(Buffer.from(fs.readFileSync(out)).equals(fs.readFileSync(fx(name)))).toBe(true);
    fs.rmSync(d, { recursive: true });
  });

  it('writes views at an offset and round-trips batches; refuses a shape that does not hold the data', () => {
    const d = tmp(), out = path.join(d, 'v.npy');
    const big = Float32Array.from({ length: 40 }, (_, i) => i / 4);
    writeNpy(out, big.subarray(10, 30), [5, 4]);
    expect(Array.from(readNpy(out).data as Float32Array)).toEqual(Array.from(big.subarray(10, 30)));
    expect(fs.readdirSync(d)).toEqual(['v.npy']); // no temporary left behind
    const e = errorOf(() => writeNpy(out, big, [3, 3]));
    expect(e.line()).toMatch(/shape \(3, 3\) holds 9 values, data has 40/);
    fs.rmSync(d, { recursive: true });
  });
});

describe('sampleShape', () => {
  const h = (shape: number[]) => ({ ...readNpyHeader(fx('f4')), shape, rows: shape[0] });
  it('accepts samples without or with the batch dim, symbolic dims match anything', () => {
    expect(sampleShape(h([100, 1, 28, 28]), [1, 1, 28, 28], 'x.npy')).toEqual([1, 28, 28]);
    expect(sampleShape(h([100, 1, 28, 28]), [-1, 1, 28, 28], 'x.npy')).toEqual([1, 28, 28]);
    expect(sampleShape(h([100, 1, 1, 28, 28]), [1, 1, 28, 28], 'x.npy')).toEqual([1, 28, 28]);
    expect(sampleShape(h([100, 1, 1, 28, 28]) as never, ['N', 1, 28, 28], 'x.npy')).toEqual([1, 28, 28]);
    expect(sampleShape(h([7, 3, 16]), ['batch', 3, 'T'], 'x.npy')).toEqual([3, 16]);
  });
  it('refuses a mismatch in one line naming the file and both shapes', () => {
    const e = errorOf(() => sampleShape(h([100, 28, 28, 1]), ['N', 1, 28, 28], 'cal.npy'));
    expect(e.line()).toBe('cal.npy: data shape [100, 28, 28, 1] does not match the model input [N, 1, 28, 28]: expected [N, 1, 28, 28]');
    // A leading 1 only counts as the batch dim when the model's batch dim allows 1.
    expect(() => sampleShape(h([100, 1, 1, 28, 28]), [8, 1, 28, 28], 'cal.npy')).toThrow(/does not match/);
    expect(() => sampleShape(h([100]), [1, 3], 'cal.npy')).toThrow(/does not match/);
  });
});

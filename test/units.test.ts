// Human units for huge counts (issue 11, group 7): the largest prefix that fits, else the exact
// integer; never exponent notation ("1.33e+24 T") or a four-digit-plus figure of a small unit
// ("8796093022208.00 TiB").
// SI prefixes: BIPM, The International System of Units, 9th edition (2019), with ronna (R, 10^27)
// and quetta (Q, 10^30) added by the 27th CGPM (2022). Binary prefixes: IEC 80000-13:2008
// (Ki = 2^10 … Yi = 2^80).
import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { bytes, si } from '../lib/report/units.js';
import { duration } from '../lib/report/budget.js';
import { modelBuilder } from '../lib/graph/build.js';
import { saveModel } from '../lib/graph/io.js';
import { offramp } from './helpers/cli.js';

describe('si', () => {
  it('takes the largest SI prefix that fits, up to quetta', () => {
    expect(si(999)).toBe('999');
    expect(si(1234567n)).toBe('1.23 M');
    expect(si(2n ** 84n)).toBe('19.3 Y'); // 2^84 = 19 342 813 113 834 066 795 298 816
    expect(si(10n ** 15n * 5n)).toBe('5 P');
    expect(si(10n ** 18n)).toBe('1 E');
    expect(si(10n ** 21n * 42n)).toBe('42 Z');
    expect(si(10n ** 27n * 3n)).toBe('3 R');
    expect(si(2n ** 100n)).toBe('1.27 Q'); // 2^100 = 1.267 650 6… × 10^30
  });
  it('moves up when rounding reaches the next prefix', () => {
    expect(si(999_999)).toBe('1 M'); // not "1000 K"
    expect(si(999_499)).toBe('999 K');
    expect(si(999_999_999_999_999n)).toBe('1 P');
  });
  it('past 999 Q gives the exact integer, never an exponent', () => {
    expect(si(10n ** 36n + 1n)).toBe('1000000000000000000000000000000000001');
    expect(si(1.33e36)).toMatch(/^\d+$/);
    expect(BigInt(si(1.33e36))).toBe(BigInt(1.33e36));
  });
});

describe('bytes', () => {
  it('takes the largest binary prefix that fits, up to yobi', () => {
    expect(bytes(1023)).toBe('1023 B');
    expect(bytes(1536n)).toBe('1.50 KiB');
    expect(bytes(2n ** 50n * 3n)).toBe('3.00 PiB');
    expect(bytes(2n ** 60n)).toBe('1.00 EiB');
    expect(bytes(2n ** 70n * 5n)).toBe('5.00 ZiB');
    expect(bytes(2n ** 83n)).toBe('8.00 YiB'); // the "8796093022208.00 TiB"
  });
  it('moves up when rounding reaches the next prefix', () => {
    expect(bytes(1048575)).toBe('1.00 MiB'); // 1023.999 KiB, not "1024.00 KiB"
  });
  it('past 1023.99 YiB gives the exact count of bytes', () => {
    expect(bytes(2n ** 90n)).toBe('1237940039285380274899124224 B');
  });
});

describe('duration', () => {
  it('ns, µs, ms, s, then whole seconds in full', () => {
    expect(duration(999n)).toBe('999 ns');
    expect(duration(1_234_567n)).toBe('1.23 ms');
    expect(duration(999_999n)).toBe('1.00 ms');
    expect(duration(10n ** 30n)).toBe('1000000000000000000000 s');
  });
});

describe('reports of a huge model', () => {
  let file: string;
  beforeAll(() => {
    // x[2^28, 2^28] · y[2^28, 2^28]: 2^84 MACs, outputs of 2^56 float32 values (256 PiB).
    const b = modelBuilder({ opset: 17, seed: 1 });
    const D = 2 ** 28;
    b.output(b.node('MatMul', [b.input('x', 1, [D, D]), b.input('y', 1, [D, D])]), 1, [D, D]);
    file = path.join(fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-units-')), 'huge.onnx');
    saveModel(b.build(), file);
  });
  it('cost prints no exponent and no oversized figure', () => {
    const r = offramp(['cost', file, '--target', 'm4f']);
    expect(r.code).toBe(3);
    expect(r.stdout).toContain('19.3 Y');
    expect(r.stdout).toContain('256.00 PiB');
    expect(r.stdout + r.stderr).not.toMatch(/\de[+-]?\d/i);
    // A number with a unit has at most four digits before its point.
    expect(r.stdout.match(/\b\d{5,}(\.\d+)? ?(K|M|G|T|P|E|Z|Y|R|Q|KiB|MiB|GiB|TiB|PiB|EiB|ZiB|YiB|µs|ms)\b/g)).toBeNull();
  });
});

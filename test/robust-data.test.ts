// Issue 11, group 3: bad data is refused with the file and its first bad row, exit 1, and nothing is written.
// Before: NaN and Inf were fitted and tuned silently, a label of 2^40 wrapped to class 0, a label equal to
// the class count and a file of 0 rows were accepted ("saving 100 %").
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { cli, makeFixture, oneLine, snapshot, ROWS, type Fixture } from './helpers/robust.js';
import { readNpy, writeNpy, checkFinite, readDataHeader } from '../lib/data/npy.js';
import { readLabels } from '../lib/data/labels.js';
import { encodeMessage } from '../lib/onnx/codec.js';
import { OfframpError } from '../lib/errors.js';
import { BINS, FRAMES } from '../scripts/demo-data.js';

let f: Fixture, p: (name: string) => string;
const PER = BINS * FRAMES;

beforeAll(async () => {
  f = await makeFixture('data');
  p = (name) => path.join(f.dir, name);
  const x = readNpy(f.x).data as Float32Array;
  const bad = (name: string, row: number, v: number) => { const c = Float32Array.from(x); c[row * PER + 17] = v; writeNpy(p(name), c, [ROWS, 1, BINS, FRAMES]); };
  bad('x-nan.npy', 7, NaN);
  bad('x-inf.npy', 31, -Infinity);
  const d = Float64Array.from(x); d[50 * PER] = Infinity;
  writeNpy(p('x-inf64.npy'), d, [ROWS, 1, BINS, FRAMES]);
  // float16: 0x7e00 is a NaN (exponent all ones, fraction non-zero; IEEE 754 binary16)
  const h = new Uint16Array(ROWS * PER).fill(0x3c00); h[9 * PER + 3] = 0x7e00;
  writeNpy(p('x-nan16.npy'), h, [ROWS, 1, BINS, FRAMES]);
  writeNpy(p('x-empty.npy'), new Float32Array(0), [0, 1, BINS, FRAMES]);
  const y = readNpy(f.y).data as BigInt64Array;
  const labels = (name: string, row: number, v: bigint) => { const c = BigInt64Array.from(y); c[row] = v; writeNpy(p(name), c, [ROWS]); };
  labels('y-huge.npy', 3, 2n ** 40n);       // wrapped to 0 in an Int32Array before
  labels('y-classes.npy', 11, 5n);          // the demo model has 5 classes: 0..4
  labels('y-negative.npy', 20, -1n);
  const yf = Float64Array.from(y, Number); yf[4] = 1.5;
  writeNpy(p('y-half.npy'), yf, [ROWS]);
  // a TensorProto data folder with a NaN in its second set
  for (let s = 0; s < 3; s++) {
    const v = Float32Array.from(x.subarray(s * PER, (s + 1) * PER));
    if (s === 1) v[5] = NaN;
    fs.mkdirSync(p(`pb/test_data_set_${s}`), { recursive: true });
    fs.writeFileSync(p(`pb/test_data_set_${s}/input_0.pb`), encodeMessage({ dims: [1n, 1n, BigInt(BINS), BigInt(FRAMES)], dataType: 1, rawData: new Uint8Array(v.buffer) }, 'TensorProto'));
  }
}, 60_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

/** Refused with exit 1, one line naming `file` and its row; the folder unchanged (no output, no manifest change). */
async function refused(args: string[], file: string, ...has: RegExp[]) {
  const before = snapshot(f.dir);
  const r = await cli(args);
  oneLine(r, 1, new RegExp(file.replace(/[.*+?^${}()|[\]\\]/g, '\\$&')), ...has);
  expect(snapshot(f.dir)).toEqual(before);
}

describe('non-finite values in data', () => {
  test('graft: NaN in float32 data names the row', () => refused(['graft', f.model, '--at', '10%', '--data', p('x-nan.npy'), '-o', p('g.onnx')], p('x-nan.npy'), /row 7\b/, /NaN/));
  test('graft: -Infinity', () => refused(['graft', f.model, '--at', '10%', '--data', p('x-inf.npy'), '-o', p('g.onnx')], p('x-inf.npy'), /row 31\b/, /Infinity/));
  test('graft: Infinity in float64 data', () => refused(['graft', f.model, '--at', '10%', '--data', p('x-inf64.npy'), '-o', p('g.onnx')], p('x-inf64.npy'), /row 50\b/));
  test('graft: NaN in float16 data', () => refused(['graft', f.model, '--at', '10%', '--data', p('x-nan16.npy'), '-o', p('g.onnx')], p('x-nan16.npy'), /row 9\b/));
  test('graft: NaN in a TensorProto folder names the tensor file', () => refused(['graft', f.model, '--at', '10%', '--data', p('pb'), '-o', p('g.onnx')], path.join('pb', 'test_data_set_1', 'input_0.pb'), /NaN/));
  test('build: NaN', () => refused(['build', f.model, '--data', p('x-nan.npy'), '--labels', f.y, '-o', p('built')], p('x-nan.npy'), /row 7\b/));
  test('tune: NaN (the manifest keeps its policy)', () => refused(['tune', f.split, '--data', p('x-nan.npy'), '--labels', f.y], p('x-nan.npy'), /row 7\b/));
  test('replay: NaN', () => refused(['replay', f.split, '--data', p('x-inf.npy'), '--csv', p('r.csv')], p('x-inf.npy'), /row 31\b/));
});

describe('labels out of range or not whole', () => {
  test('graft: a label of 2^40 does not wrap', () => refused(['graft', f.model, '--at', '10%', '--data', f.x, '--labels', p('y-huge.npy'), '-o', p('g.onnx')], p('y-huge.npy'), /row 3\b/, /1099511627776/));
  test('graft: a label equal to the class count', () => refused(['graft', f.model, '--at', '10%', '--data', f.x, '--labels', p('y-classes.npy'), '-o', p('g.onnx')], p('y-classes.npy'), /row 11\b/, /0\.\.4/));
  test('build: a negative label', () => refused(['build', f.model, '--data', f.x, '--labels', p('y-negative.npy'), '-o', p('built')], p('y-negative.npy'), /row 20\b/));
  test('tune: the file row, not an index into the tuning part', () => refused(['tune', f.split, '--data', f.x, '--labels', p('y-classes.npy')], p('y-classes.npy'), /row 11\b/));
  test('replay: a label equal to the class count', () => refused(['replay', f.split, '--data', f.x, '--labels', p('y-classes.npy')], p('y-classes.npy'), /row 11\b/));
  test('replay: a label of 1.5', () => refused(['replay', f.split, '--data', f.x, '--labels', p('y-half.npy')], p('y-half.npy'), /row 4\b/, /whole/));
  test('segment ids past int32 are refused, not wrapped into equal ids', () => {
    const file = p('seg-huge.npy');
    writeNpy(file, BigInt64Array.from([0n, 2n ** 32n]), [2]);
    let e: unknown;
    try { readLabels(file, { what: 'segment id' }); } catch (x) { e = x; }
    expect((e as OfframpError).line()).toMatch(/seg-huge\.npy: row 1: segment id 4294967296 is outside/);
  });
});

describe('empty data', () => {
  test('graft: 0 rows', () => refused(['graft', f.model, '--at', '10%', '--data', p('x-empty.npy'), '-o', p('g.onnx')], p('x-empty.npy'), /no samples/));
  test('build: 0 rows', () => refused(['build', f.model, '--data', p('x-empty.npy'), '-o', p('built')], p('x-empty.npy'), /no samples/));
  test('tune: 0 rows', () => refused(['tune', f.split, '--data', p('x-empty.npy')], p('x-empty.npy'), /no samples/));
  test('replay: 0 frames', () => refused(['replay', f.split, '--data', p('x-empty.npy')], p('x-empty.npy'), /no samples/));
});

describe('the data layer on its own', () => {
  test('checkFinite names the first bad row of a batch, counted from the batch start', () => {
    const a = new Float32Array(12); a[7] = NaN; a[10] = Infinity;
    let e: unknown;
    try { checkFinite(a, 4, 100, 'd.npy'); } catch (x) { e = x; }
    expect(e).toBeInstanceOf(OfframpError);
    expect((e as OfframpError).line()).toBe('d.npy: row 102: value NaN (element 1 of the row): data must be finite');
    expect(() => checkFinite(new Int32Array(4), 2, 0, 'i.npy')).not.toThrow();
  });
  test('a 0-d array is not rows of samples', () => {
    const file = p('scalar.npy');
    writeNpy(file, new Float32Array([1]), []);
    expect(() => readDataHeader(file)).toThrow(/0-d/);
  });
  test('labels counted against the data they belong to', () => {
    expect(() => readLabels(f.y, { rows: ROWS + 1, of: 'x.npy' })).toThrow(new RegExp(`${ROWS} labels for ${ROWS + 1} rows of x.npy`));
    expect(readLabels(f.y, { rows: ROWS, classes: 5 }).length).toBe(ROWS);
  });
});

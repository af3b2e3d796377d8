// TensorProto folders in the conformance-test layout. Reference: the ONNX
// conformance data itself (Debian libonnx-testdata), read back through the
// codec's own tensorNumbers, and hand-built tensors using each typed field.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { describe, it, expect } from 'vitest';
import { listDataSets, setFiles, readTensorFile, pbSamples } from '../lib/data/pbdir.js';
import { encodeMessage, decodeTensor } from '../lib/onnx/codec.js';
import { tensorNumbers } from '../lib/onnx/tensor.js';
import type { TensorProto } from '../lib/onnx/types.js';
import { OfframpError } from '../lib/errors.js';
import { halfToNumber } from '../lib/data/npy.js';
import { requireTestdata, cases, dataSet } from './helpers/testdata.js';

const dims = (...d: number[]) => BigInt64Array.from(d.map(BigInt));
const write = (file: string, t: TensorProto) => { fs.mkdirSync(path.dirname(file), { recursive: true }); fs.writeFileSync(file, encodeMessage(t, 'TensorProto')); };
function refusal(f: () => unknown, file: string, re: RegExp) {
  try { f(); expect.unreachable(); } catch (e) {
    expect(e).toBeInstanceOf(OfframpError);
    const line = (e as OfframpError).line();
    expect(line).toMatch(re);
    expect(line.startsWith(file)).toBe(true);
    expect(line).not.toContain('\n');
  }
}

describe('TensorProto folders', () => {
  it('lists sets and files in numeric order, reads raw_data and every typed field', () => {
    const d = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-pb-'));
    for (const k of [10, 0, 2]) {
      write(path.join(d, `test_data_set_${k}`, 'input_0.pb'), { name: 'x', dataType: 1, dims: dims(2, 2), rawData: new Uint8Array(Float32Array.from([k, 1.5, -2, 0.25]).buffer) });
      write(path.join(d, `test_data_set_${k}`, 'input_1.pb'), { name: 'n', dataType: 7, dims: dims(2), int64Data: BigInt64Array.from([-(2n ** 63n), BigInt(k)]) });
      write(path.join(d, `test_data_set_${k}`, 'output_0.pb'), { dataType: 6, dims: dims(1), int32Data: Int32Array.from([k]) });
    }
    fs.writeFileSync(path.join(d, 'model.onnx'), '');
    fs.mkdirSync(path.join(d, 'test_data_set_x'));
    expect(listDataSets(d).map((s) => path.basename(s))).toEqual(['test_data_set_0', 'test_data_set_2', 'test_data_set_10']);
    const samples = [...pbSamples(d)];
    expect(samples.map((s) => s.tensors.map((t) => t.name))).toEqual([['x', 'n'], ['x', 'n'], ['x', 'n']]);
    expect(samples[2].tensors[0]).toEqual({ name: 'x', dtype: 1, dims: [2, 2], data: Float32Array.from([10, 1.5, -2, 0.25]) });
    expect(samples[2].tensors[1].data).toEqual(BigInt64Array.from([-(2n ** 63n), 10n]));
    expect([...pbSamples(d, 'output')].map((s) => Array.from(s.tensors[0].data as Int32Array))).toEqual([[0], [2], [10]]);

    const one = path.join(d, 'one');
    const typed: [TensorProto, unknown][] = [
      [{ dataType: 1, dims: dims(2), floatData: Float32Array.from([1.25, -3]) }, Float32Array.from([1.25, -3])],
      [{ dataType: 11, dims: dims(1), doubleData: Float64Array.from([0.1]) }, Float64Array.from([0.1])],
      [{ dataType: 2, dims: dims(2), int32Data: Int32Array.from([0, 255]) }, Uint8Array.from([0, 255])],
      [{ dataType: 3, dims: dims(2), int32Data: Int32Array.from([-128, 127]) }, Int8Array.from([-128, 127])],
      [{ dataType: 9, dims: dims(2), int32Data: Int32Array.from([1, 0]) }, Uint8Array.from([1, 0])],
      [{ dataType: 10, dims: dims(1), int32Data: Int32Array.from([0x3c00]) }, Uint16Array.from([0x3c00])],
      [{ dataType: 12, dims: dims(1), uint64Data: BigUint64Array.from([4294967295n]) }, Uint32Array.from([4294967295])],
      [{ dataType: 13, dims: dims(1), uint64Data: BigUint64Array.from([2n ** 64n - 1n]) }, BigUint64Array.from([2n ** 64n - 1n])],
      [{ dataType: 1, dims: dims(0, 3) }, new Float32Array(0)],
      [{ dataType: 6, dims: dims(), int32Data: Int32Array.from([7]) }, Int32Array.from([7])],
    ];
    typed.forEach(([t], i) => write(path.join(one, `input_${i}.pb`), t));
    expect(listDataSets(one)).toEqual([one]);
    expect(setFiles(one).map((f) => path.basename(f))).toEqual(typed.map((_, i) => `input_${i}.pb`));
    const [s] = [...pbSamples(one)];
    s.tensors.forEach((t, i) => expect(t.data, `input_${i}`).toEqual(typed[i][1]));
    fs.rmSync(d, { recursive: true });
  });

  it('refuses with one line naming the file', () => {
    const d = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-pb-'));
    refusal(() => listDataSets(d), d, /no test_data_set_\* folders/);
    refusal(() => listDataSets(path.join(d, 'nope')), path.join(d, 'nope'), /cannot read the folder: no such file/);
    const f = path.join(d, 'input_0.pb');
    write(f, { name: 'x', dataType: 1, dims: dims(3), rawData: new Uint8Array(8) });
    refusal(() => readTensorFile(f), f, /tensor x: raw_data has 8 bytes, dims \[3\] need 12/);
    write(f, { dataType: 1, dims: dims(3), floatData: Float32Array.from([1]) });
    refusal(() => readTensorFile(f), f, /1 values, dims \[3\] need 3/);
    write(f, { dataType: 8, dims: dims(1), stringData: [new Uint8Array([97])] });
    refusal(() => readTensorFile(f), f, /element type string is not supported/);
    write(f, { dataType: 1, dims: dims(1), dataLocation: 1, externalData: [{ key: 'location', value: 'w.bin' }] });
    refusal(() => readTensorFile(f), f, /external data/);
    fs.writeFileSync(f, Buffer.from([0xff, 0xff, 0xff]));
    refusal(() => readTensorFile(f), f, /not a TensorProto/);
    fs.mkdirSync(path.join(d, 'test_data_set_0'));
    fs.rmSync(f);
    refusal(() => [...pbSamples(d)], path.join(d, 'test_data_set_0'), /no input_\*\.pb files/);
    fs.rmSync(d, { recursive: true });
  });

  it.runIf(requireTestdata())('reads the conformance inputs and outputs as the codec does', () => {
    let checked = 0;
    for (const c of cases('node')) {
      for (const file of [...dataSet(c, 'input'), ...dataSet(c, 'output')]) {
        const t = decodeTensor(fs.readFileSync(file));
        const ref = tensorNumbers(t, 1 << 14);
        if (!ref || t.dataType === 8 || ![1, 2, 3, 4, 5, 6, 7, 9, 10, 11, 12, 13].includes(t.dataType ?? 0)) continue;
        const got = readTensorFile(file);
        expect(got.dims).toEqual(Array.from(t.dims ?? [], Number));
        expect(got.dtype).toBe(t.dataType);
        const sat = (x: bigint) => Number(x > BigInt(Number.MAX_SAFE_INTEGER) ? BigInt(Number.MAX_SAFE_INTEGER) : x < BigInt(Number.MIN_SAFE_INTEGER) ? BigInt(Number.MIN_SAFE_INTEGER) : x);
        const mine = Array.from(got.data as ArrayLike<number | bigint>, (x) => (typeof x === 'bigint' ? sat(x) : got.dtype === 10 ? halfToNumber(x) : x));
        const nan = (xs: number[]) => xs.map((x) => (Number.isNaN(x) ? 'NaN' : x));
        expect(nan(mine), file).toEqual(nan(ref));
        checked++;
      }
    }
    expect(checked).toBeGreaterThan(500);
  });
});

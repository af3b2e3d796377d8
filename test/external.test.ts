import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { encodeModel } from '../lib/onnx/codec.js';
import { loadModel, saveModel } from '../lib/graph/io.js';
import { modelToProto } from '../lib/graph/ir.js';
import { modelBuilder } from '../lib/graph/build.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { OfframpError } from '../lib/errors.js';
import type { ModelProto, TensorProto } from '../lib/onnx/types.js';

let root: string;
beforeAll(() => { root = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-ext-')); });
afterAll(() => fs.rmSync(root, { recursive: true, force: true }));
let n = 0;
const folder = () => { const d = path.join(root, `m${n++}`); fs.mkdirSync(d); return d; };

const W = Float32Array.from({ length: 16 }, (_, i) => i + 0.5);
const B = Float32Array.from({ length: 4 }, (_, i) => -i);
const bytesOf = (a: Float32Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);

/** x[1,4] · W[4,4] + b[4], both initializers external; `ext` gives each its entries. */
function writeModel(dir: string, ext: Record<'W' | 'b', Record<string, string>>): string {
  const t = (name: 'W' | 'b', dims: bigint[]): TensorProto => ({
    dims: BigInt64Array.from(dims), dataType: FLOAT, name, dataLocation: 1,
    externalData: Object.entries(ext[name]).map(([key, value]) => ({ key, value })),
  });
  const m: ModelProto = {
    irVersion: 8n, opsetImport: [{ version: 17n }],
    graph: {
      node: [{ input: ['x', 'W'], output: ['h'], opType: 'MatMul' }, { input: ['h', 'b'], output: ['y'], opType: 'Add' }],
      name: 'g', initializer: [t('W', [4n, 4n]), t('b', [4n])],
      input: [{ name: 'x', type: { tensorType: { elemType: FLOAT, shape: { dim: [{ dimValue: 1n }, { dimValue: 4n }] } } } }],
      output: [{ name: 'y', type: { tensorType: { elemType: FLOAT } } }],
    },
  };
  const file = path.join(dir, 'model.onnx');
  fs.writeFileSync(file, encodeModel(m));
  return file;
}

describe('loading external data', () => {
  test('offset and length select the bytes, as views of one read of the file', () => {
    const dir = folder();
    // W at 100, b right after with no length entry (implied by dims × type).
    fs.writeFileSync(path.join(dir, 'weights.bin'), Buffer.concat([Buffer.alloc(100, 0xee), bytesOf(W), bytesOf(B), Buffer.alloc(7, 0xee)]));
    const file = writeModel(dir, {
      W: { location: 'weights.bin', offset: '100', length: '64' },
      b: { location: 'weights.bin', offset: '164' },
    });
    const m = loadModel(file);
    const w = m.graph.initializers.get('W')!, b = m.graph.initializers.get('b')!;
    expect(bytesOf(W).equals(Buffer.from(w.rawData!))).toBe(true);
    expect(bytesOf(B).equals(Buffer.from(b.rawData!))).toBe(true);
    expect(w.rawData!.buffer).toBe(b.rawData!.buffer);
    expect(w.rawData!.buffer.byteLength).toBeGreaterThanOrEqual(100 + 64 + 16 + 7);
    // The origin stays known.
    expect(w.externalData?.find((e) => e.key === 'location')?.value).toBe('weights.bin');
  });

  test('a location in a subfolder is fine', () => {
    const dir = folder();
    fs.mkdirSync(path.join(dir, 'data'));
    fs.writeFileSync(path.join(dir, 'data', 'w'), Buffer.concat([bytesOf(W), bytesOf(B)]));
    const file = writeModel(dir, { W: { location: 'data/w' }, b: { location: './data/w', offset: '64', length: '16' } });
    expect(Array.from(new Float32Array(Uint8Array.from(loadModel(file).graph.initializers.get('b')!.rawData!).buffer))).toEqual(Array.from(B));
  });
});

describe('saving with externalThreshold', () => {
  const build = () => {
    const b = modelBuilder({ opset: 17, seed: 7 });
    const x = b.input('x', FLOAT, [1, 64]);
    let h = x;
    for (let i = 0; i < 3; i++) h = b.node('Relu', [b.node('Gemm', [h, b.init(`fc${i}.w`, FLOAT, [64, 64]), b.init(`fc${i}.b`, FLOAT, [64])], { transB: 1 })]);
    b.output(h, FLOAT, [1, 64]);
    return b.build();
  };

  test('big tensors go to one aligned file; reload is equal; saving inline again gives the original bytes', () => {
    const dir = folder(), file = path.join(dir, 'net.onnx');
    const m = build();
    const original = encodeModel(modelToProto(m));
    const rep = saveModel(m, file, { externalThreshold: 1024 });
    expect(fs.readdirSync(dir).sort()).toEqual(['net.onnx', 'net.onnx.data']);
    expect(rep.externalBytes).toBe(fs.statSync(path.join(dir, 'net.onnx.data')).size);
    expect(rep.externalBytes).toBeGreaterThanOrEqual(3 * 64 * 64 * 4);
    expect(rep.bytes).toBeLessThan(3 * 256 + 1024);

    const back = loadModel(file);
    for (const [name, t] of m.graph.initializers) {
      const u = back.graph.initializers.get(name)!;
      expect(Buffer.from(u.rawData!).equals(Buffer.from(t.rawData!)), name).toBe(true);
      const ext = new Map(u.externalData?.map((e) => [e.key, e.value]));
      // The 64×64 weights (16 KiB) go out, 64-byte aligned; the 256-byte biases stay inline.
      if (t.rawData!.length >= 1024) { expect(ext.get('location')).toBe('net.onnx.data'); expect(Number(ext.get('offset')) % 64).toBe(0); }
      else expect(u.dataLocation).toBeUndefined();
    }
    const inline = path.join(dir, 'inline.onnx');
    saveModel(back, inline);
    expect(Buffer.compare(fs.readFileSync(inline), Buffer.from(original))).toBe(0);
  });

  test('a custom external file name', () => {
    const dir = folder(), file = path.join(dir, 'a.onnx');
    saveModel(build(), file, { externalThreshold: 0, externalFile: 'weights.bin' });
    expect(fs.existsSync(path.join(dir, 'weights.bin'))).toBe(true);
    expect(loadModel(file).graph.initializers.get('fc2.b')!.rawData!.length).toBe(256);
  });
});

describe('refusals name the model file', () => {
  function refuse(setup: (dir: string) => string, why: RegExp) {
    const file = setup(folder());
    let err: unknown;
    try { loadModel(file); } catch (e) { err = e; }
    expect(err).toBeInstanceOf(OfframpError);
    const e = err as OfframpError;
    expect(e.file).toBe(file);
    expect(e.line()).toContain(file);
    expect(e.line()).not.toContain('\n');
    expect(e.message).toMatch(why);
  }
  const ok = (dir: string) => fs.writeFileSync(path.join(dir, 'w.bin'), Buffer.concat([bytesOf(W), bytesOf(B)]));
  const bOk = { location: 'w.bin', offset: '64' };

  test('an absolute location', () => refuse((d) => { ok(d); return writeModel(d, { W: { location: path.join(d, 'w.bin') }, b: bOk }); }, /absolute/));
  test("a location with '..'", () => refuse((d) => {
    fs.writeFileSync(path.join(path.dirname(d), 'outside.bin'), bytesOf(W));
    ok(d);
    return writeModel(d, { W: { location: '../outside.bin' }, b: bOk });
  }, /'\.\.'/));
  test('a symlink pointing outside the folder', () => refuse((d) => {
    const outside = path.join(root, `secret${n}.bin`);
    fs.writeFileSync(outside, bytesOf(W));
    fs.symlinkSync(outside, path.join(d, 'link.bin'));
    ok(d);
    return writeModel(d, { W: { location: 'link.bin' }, b: bOk });
  }, /outside the model folder/));
  test('a missing file', () => refuse((d) => { ok(d); return writeModel(d, { W: { location: 'nope.bin' }, b: bOk }); }, /does not exist/));
  test('offset + length past the end', () => refuse((d) => { ok(d); return writeModel(d, { W: { location: 'w.bin', offset: '32', length: '64' }, b: bOk }); }, /past the end/));
  test('a length that disagrees with dims', () => refuse((d) => { ok(d); return writeModel(d, { W: { location: 'w.bin', length: '60' }, b: bOk }); }, /does not match/));
  test('a negative or non-numeric offset', () => refuse((d) => { ok(d); return writeModel(d, { W: { location: 'w.bin', offset: '-4' }, b: bOk }); }, /not a valid number/));
  test('garbage offset', () => refuse((d) => { ok(d); return writeModel(d, { W: { location: 'w.bin', offset: 'abc' }, b: bOk }); }, /not a valid number/));
});

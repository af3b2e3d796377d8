// Bad input of every kind ends as one OfframpError line naming the file, never a raw stack.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { encodeModel } from '../lib/onnx/codec.js';
import { loadModel, parseModel } from '../lib/graph/io.js';
import { modelToProto, type Model } from '../lib/graph/ir.js';
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { OfframpError } from '../lib/errors.js';
import type { ModelProto } from '../lib/onnx/types.js';

let dir: string;
beforeAll(() => { dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-io-')); });
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));

function small(): Model {
  const b = modelBuilder({ opset: 17, seed: 3 });
  const x = b.input('x', FLOAT, [1, 3, 8, 8]);
  const c = b.node('Conv', [x, b.init('w', FLOAT, [4, 3, 3, 3]), b.init('bias', FLOAT, [4])], { pads: [1, 1, 1, 1] });
  const y = b.node('GlobalAveragePool', [b.node('Relu', [c])]);
  b.output(y, FLOAT, [1, 4, 1, 1]);
  return b.build();
}
const goodBytes = () => encodeModel(modelToProto(small()));

function failsWith(file: string, why?: RegExp, load: () => unknown = () => loadModel(file)): OfframpError {
  let err: unknown;
  try { load(); } catch (e) { err = e; }
  if (!(err instanceof OfframpError)) throw new Error(`expected an OfframpError for ${file}, got ${err instanceof Error ? err.stack : String(err)}`);
  expect(err.file).toBe(file);
  expect(err.line()).toContain(file);
  expect(err.line()).not.toMatch(/\n|\s+at .+:\d+:\d+/);
  if (why) expect(err.message).toMatch(why);
  return err;
}
const write = (name: string, bytes: Uint8Array | ModelProto) => {
  const file = path.join(dir, name);
  fs.writeFileSync(file, bytes instanceof Uint8Array ? bytes : encodeModel(bytes));
  return file;
};

describe('bytes that are not a model', () => {
  test('an empty file', () => { failsWith(write('empty.onnx', new Uint8Array(0)), /empty/); });
  test('a missing file', () => { failsWith(path.join(dir, 'absent.onnx'), /no such file/); });
  test('a folder', () => { failsWith(dir, /is a folder, not a regular file/); });

  test('every truncation of a valid model', () => {
    const good = goodBytes();
    const file = write('truncated.onnx', good.subarray(0, good.length >> 1));
    failsWith(file, /not a valid ONNX model/);
    for (let n = 1; n < good.length; n++) failsWith(file, undefined, () => parseModel(good.subarray(0, n), file));
  });

  test('seeded random bytes', () => {
    const rnd = mulberry32(12345);
    const file = write('random.onnx', Uint8Array.from({ length: 300 }, () => (rnd() * 256) | 0));
    failsWith(file, /not a valid ONNX model/);
    for (let k = 0; k < 300; k++) {
      const bytes = Uint8Array.from({ length: 1 + ((rnd() * 600) | 0) }, () => (rnd() * 256) | 0);
      failsWith(file, undefined, () => parseModel(bytes, file));
    }
  });

  test('random bytes spliced into a valid model', () => {
    const rnd = mulberry32(777), good = goodBytes(), file = path.join(dir, 'spliced.onnx');
    for (let k = 0; k < 300; k++) {
      const bytes = Uint8Array.from(good);
      const at = (rnd() * bytes.length) | 0;
      for (let i = 0; i < 4 && at + i < bytes.length; i++) bytes[at + i] = (rnd() * 256) | 0;
      // Some corruptions still decode (a changed name or weight byte): those must load or fail cleanly.
      try { parseModel(bytes, file); } catch (e) {
        if (!(e instanceof OfframpError)) throw new Error(`raw error at byte ${at}: ${(e as Error).stack}`);
        expect(e.line()).not.toContain('\n');
      }
    }
  });

  test('protobuf nested far deeper than any model', () => {
    // ValueInfo type: Sequence of Sequence of ... 50k levels, written inside out.
    const chunks: Buffer[] = [];
    let len = 0;
    const wrap = (tagByte: number) => {
      const v: number[] = [tagByte]; let n = len;
      while (n >= 0x80) { v.push((n & 0x7f) | 0x80); n >>>= 7; }
      v.push(n);
      chunks.push(Buffer.from(v)); len += v.length;
    };
    for (let i = 0; i < 50_000; i++) { wrap(0x0a); wrap(0x22); } // Sequence.elem_type (1), TypeProto.sequence_type (4)
    wrap(0x12); // ValueInfoProto.type (2)
    const vi = Buffer.concat(chunks.reverse());
    const graph = Buffer.concat([Buffer.from([0x5a]), Buffer.from(varint(vi.length)), vi]); // GraphProto.input (11)
    const model = Buffer.concat([Buffer.from([0x08, 0x08, 0x42, 0x02, 0x10, 0x11, 0x3a]), Buffer.from(varint(graph.length)), graph]);
    failsWith(write('deep.onnx', model), /not a valid ONNX model/);
  });
});
const varint = (n: number) => { const v: number[] = []; while (n >= 0x80) { v.push((n & 0x7f) | 0x80); n >>>= 7; } v.push(n); return v; };

describe('models with a broken structure', () => {
  const model = (edit: (p: ModelProto) => void) => { const p = modelToProto(small()); edit(p); return p; };

  test('no graph, no opset', () => {
    failsWith(write('nograph.onnx', { irVersion: 8n, opsetImport: [{ version: 17n }] }), /no graph/);
    failsWith(write('noopset.onnx', model((p) => { delete p.opsetImport; })), /opset_import/);
  });

  test('a cycle', () => {
    const b = modelBuilder({ opset: 17 });
    const x = b.input('x', FLOAT, [4]);
    b.node('Add', [x, 'loop_b'], {}, { outputs: ['loop_a'] });
    b.node('Relu', ['loop_a'], {}, { outputs: ['loop_b'] });
    b.output('loop_b', FLOAT, [4]);
    failsWith(write('cycle.onnx', modelToProto(b.build({ unchecked: true }))), /cycle/);
  });

  test('a node reading a value nobody produces', () => {
    const file = write('dangling.onnx', model((p) => { p.graph!.node![1].input = ['nobody']; }));
    expect(failsWith(file).message).toMatch(/reads 'nobody', which no node, input or initializer provides/);
  });

  test('two producers of one value', () => {
    const file = write('twice.onnx', model((p) => { const n = p.graph!.node!; n[2].output = [...n[1].output!]; }));
    failsWith(file, /two producers/);
  });

  test('a node writing over an initializer', () => {
    failsWith(write('overwrite.onnx', model((p) => { p.graph!.node![1].output = ['w']; })), /initializer/);
  });

  test('an initializer with a negative or absurd dim', () => {
    failsWith(write('negdim.onnx', model((p) => { p.graph!.initializer![1].dims = BigInt64Array.of(-4n); })), /dim/);
    failsWith(write('hugedim.onnx', model((p) => { p.graph!.initializer![1].dims = BigInt64Array.of(2n ** 62n); })), /dim/);
    failsWith(write('hugecount.onnx', model((p) => { p.graph!.initializer![1].dims = BigInt64Array.of(2n ** 40n, 2n ** 40n); })), /dim|bytes/);
  });

  test('raw_data that disagrees with dims, or an unknown element type', () => {
    failsWith(write('short.onnx', model((p) => { const t = p.graph!.initializer![0]; t.rawData = t.rawData!.subarray(4); })), /raw_data/);
    failsWith(write('dtype.onnx', model((p) => { p.graph!.initializer![0].dataType = 99; })), /element type/);
  });

  test('a negative dim in an external tensor', () => {
    const file = write('negext.onnx', model((p) => {
      const t = p.graph!.initializer![1];
      delete t.rawData;
      Object.assign(t, { dims: BigInt64Array.of(-1n), dataLocation: 1, externalData: [{ key: 'location', value: 'x.bin' }] });
    }));
    fs.writeFileSync(path.join(dir, 'x.bin'), new Uint8Array(16));
    failsWith(file, /dim/);
  });
});

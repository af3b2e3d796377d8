import { describe, test, expect } from 'vitest';
import * as ort from 'onnxruntime-node';
import { modelBuilder, mulberry32 } from '../lib/graph/build.js';
import { encodeModel, decodeModel } from '../lib/onnx/codec.js';
import { modelToProto, type Model } from '../lib/graph/ir.js';
import { parseModel } from '../lib/graph/io.js';
import { FLOAT, INT64 } from '../lib/onnx/dtype.js';
import { AttrType } from '../lib/onnx/types.js';
import { mobilenetV1, resnet18 } from './helpers/nets.js';

const bytesOf = (m: Model) => encodeModel(modelToProto(m));
const session = (m: Model) => ort.InferenceSession.create(bytesOf(m));

function tiny(seed = 1) {
  const b = modelBuilder({ opset: 17, seed });
  const x = b.input('x', FLOAT, ['N', 4]);
  const h = b.node('Gemm', [x, b.init('w', FLOAT, [3, 4]), b.init('w', FLOAT, [3])], { transB: 1, alpha: 0.5 });
  const shape = b.init('shape', INT64, [2], [-1, 3]);
  const y = b.node('Reshape', [b.node('LeakyRelu', [h], { alpha: b.float(1) }), shape]);
  const [top, idx] = b.node('TopK', [y, b.init('k', INT64, [1], [2])], { axis: 1 }, { outputs: 2 });
  b.output(top, FLOAT, ['N', 2]);
  b.output(idx, INT64, ['N', 2]);
  return { b, model: b.build(), names: { x, h, y, top, idx } };
}

describe('modelBuilder', () => {
  test('names are unique and deterministic; attributes get their ONNX types', () => {
    const { model, names } = tiny();
    const g = model.graph;
    expect([...g.initializers.keys()]).toEqual(['w', 'w_1', 'shape', 'k']);
    expect(Object.values(names)).toEqual(['x', 'gemm_0_out', 'reshape_2_out', 'topk_3_out', 'topk_3_out1']);
    const gemm = g.nodes[0].attrs;
    expect(gemm.get('transB')).toMatchObject({ type: AttrType.INT, i: 1n });
    expect(gemm.get('alpha')).toMatchObject({ type: AttrType.FLOAT, f: 0.5 });
    expect(g.nodes[1].attrs.get('alpha')).toMatchObject({ type: AttrType.FLOAT, f: 1 });
    expect(model.irVersion).toBe(8n);
    expect(model.opsets.get('')).toBe(17);
    expect(Buffer.compare(Buffer.from(bytesOf(tiny().model)), Buffer.from(bytesOf(model)))).toBe(0);
    expect(Buffer.compare(Buffer.from(bytesOf(tiny(2).model)), Buffer.from(bytesOf(model)))).not.toBe(0);
  });

  test('a built model is what loading its bytes gives', () => {
    const { model } = tiny();
    const back = parseModel(Uint8Array.from(bytesOf(model))); // a plain Uint8Array, as the builder makes
    expect(modelToProto(back)).toEqual(modelToProto(model));
    expect(decodeModel(bytesOf(model)).graph!.input![0].type!.tensorType!.shape!.dim![0]).toEqual({ dimParam: 'N' });
  });

  test('list attributes: ints, floats (wrapped), strings; non-integers unwrapped are refused', () => {
    const b = modelBuilder({ opset: 17 });
    const x = b.input('x', FLOAT, [1]);
    const y = b.node('Foo', [x], { a: [1, 2], f: b.floats([0.5, 1]), s: 'hi', ss: ['a', 'b'], t: b.tensor(FLOAT, [2], [1, 2]) }, { domain: 'test.custom' });
    b.output(y);
    const m = b.build();
    const a = m.graph.nodes[0].attrs;
    expect(a.get('a')).toMatchObject({ type: AttrType.INTS, ints: BigInt64Array.of(1n, 2n) });
    expect(a.get('f')).toMatchObject({ type: AttrType.FLOATS, floats: Float32Array.of(0.5, 1) });
    expect(a.get('ss')!.type).toBe(AttrType.STRINGS);
    expect(a.get('t')!.t!.rawData!.length).toBe(8);
    expect(m.opsets.get('test.custom')).toBe(1);
    expect(() => b.node('Foo', [x], { bad: [0.5] })).toThrow(/b\.floats/);
  });

  test('the structure is checked unless asked not to', () => {
    const b = modelBuilder({ opset: 17 });
    b.output(b.node('Relu', ['missing']));
    expect(() => b.build()).toThrow(/missing/);
    expect(b.build({ unchecked: true }).graph.nodes).toHaveLength(1);
  });

  test('random weights are seeded, per name, and scaled by fan-in', () => {
    const w = (seed: number) => {
      const b = modelBuilder({ opset: 17, seed });
      b.init('a', FLOAT, [8, 100]);
      const t = b.init('b', FLOAT, [64, 3, 7, 7]);
      return b.build({ unchecked: true }).graph.initializers.get(t)!;
    };
    const v = new Float32Array(Uint8Array.from(w(5).rawData!).buffer);
    expect(Buffer.from(w(5).rawData!).equals(Buffer.from(w(5).rawData!))).toBe(true);
    expect(Buffer.from(w(6).rawData!).equals(Buffer.from(w(5).rawData!))).toBe(false);
    const bound = 1 / Math.sqrt(3 * 7 * 7);
    expect(v.every((x) => Math.abs(x) <= bound)).toBe(true);
    expect(Math.max(...v)).toBeGreaterThan(bound * 0.9);
    // mulberry32 reference value for seed 0, (from memory).
    expect(mulberry32(0)()).toBeCloseTo(0.26642920868471265, 12);
  });
});

describe('onnxruntime accepts built models', () => {
  test('the tiny graph runs and computes what it says', async () => {
    const s = await session(tiny().model);
    const x = new ort.Tensor('float32', Float32Array.of(1, 2, 3, 4, -1, -2, -3, -4), [2, 4]);
    const r = await s.run({ x });
    expect(r[s.outputNames[0]].dims).toEqual([2, 2]);
    expect(r[s.outputNames[1]].type).toBe('int64');
  });

  test('MobileNet v1 and ResNet-18 (folded BN) load and give finite logits', async () => {
    for (const m of [mobilenetV1({ width: 0.25 }), resnet18({ bn: false, weights: 'zeros' })]) {
      const s = await session(m);
      const r = await s.run({ input: new ort.Tensor('float32', new Float32Array(3 * 224 * 224).fill(0.5), [1, 3, 224, 224]) });
      const y = r.logits.data as Float32Array;
      expect(y.length).toBe(1000);
      expect(y.every(Number.isFinite)).toBe(true);
    }
  });
});

import { describe, test, expect } from 'vitest';
import fs from 'node:fs';
import { createRequire } from 'node:module';
import onnxProto from 'onnx-proto';
import { cases, requireTestdata } from './helpers/testdata.js';
import { decodeModel, encodeModel, decodeTensor, encodeMessage, unknownFieldPaths } from '../lib/onnx/codec.js';
import { parseModel } from '../lib/graph/io.js';
import { modelToProto } from '../lib/graph/ir.js';
import type { AttributeProto, GraphProto, ModelProto, TensorProto } from '../lib/onnx/types.js';

// protobufjs finds `long` through a hoisted helper that cannot see onnx-proto's own copy,
// and then reads int64 as lossy doubles; hand it `long` so the reference is exact.
const req = createRequire(createRequire(import.meta.url).resolve('onnx-proto'));
const pb = req('protobufjs/minimal');
pb.util.Long = req('long');
pb.configure();
const { onnx } = onnxProto;

const have = requireTestdata();
const all = have ? cases('all') : [];

describe.skipIf(!have)('conformance models', () => {
  test('there are about a thousand of them', () => expect(all.length).toBeGreaterThan(1000));

  test('decode → encode is byte-identical, and decodes deep-equal', () => {
    for (const c of all) {
      const buf = fs.readFileSync(c.model);
      const m = decodeModel(buf);
      const again = encodeModel(m);
      expect(Buffer.compare(Buffer.from(again), buf), c.name).toBe(0);
      expect(decodeModel(again), c.name).toEqual(m);
    }
  });

  test('load into the IR and write back is byte-identical', () => {
    for (const c of all) {
      const buf = fs.readFileSync(c.model);
      const out = encodeModel(modelToProto(parseModel(buf, undefined, { unchecked: true })));
      expect(Buffer.compare(Buffer.from(out), buf), c.name).toBe(0);
    }
  });

  // Reference: onnx-proto, the protobufjs code generated from onnx.proto of ONNX 1.10 (IR 8).
  test('agrees with the onnx-proto reference decoder', () => {
    const big = (x: unknown) => BigInt(String(x));
    const tensor = (ours: TensorProto, ref: any, at: string) => {
      expect(ours.name ?? '', at).toBe(ref.name);
      expect(ours.dataType ?? 0, at).toBe(ref.dataType);
      expect(Array.from(ours.dims ?? []), at).toEqual(ref.dims.map(big));
      expect(ours.rawData?.length ?? 0, at).toBe(ref.rawData.length);
      expect(Array.from(ours.int64Data ?? []), at).toEqual(ref.int64Data.map(big));
      expect(ours.floatData?.length ?? 0, at).toBe(ref.floatData.length);
    };
    const attr = (a: AttributeProto, r: any, at: string) => {
      expect(a.name, at).toBe(r.name);
      expect(a.type ?? 0, at).toBe(r.type);
      expect(Array.from(a.ints ?? []), at).toEqual(r.ints.map(big));
      expect(a.i ?? 0n, at).toBe(big(r.i));
      expect(Object.is(a.f ?? 0, r.f), at).toBe(true);
      expect(Array.from(a.floats ?? []), at).toEqual(r.floats);
      expect(Buffer.from(a.s ?? []).toString('hex'), at).toBe(Buffer.from(r.s).toString('hex'));
      if (a.t) tensor(a.t, r.t, `${at}.t`);
      if (a.g) graph(a.g, r.g, `${at}.g`);
      (a.graphs ?? []).forEach((g, i) => graph(g, r.graphs[i], `${at}.graphs[${i}]`));
      expect(a.graphs?.length ?? 0, at).toBe(r.graphs.length);
    };
    const graph = (g: GraphProto, r: any, at: string): void => {
      const nodes = g.node ?? [];
      expect(nodes.length, at).toBe(r.node.length);
      nodes.forEach((n, i) => {
        const rn = r.node[i], nat = `${at}.node[${i}]`;
        expect(n.opType, nat).toBe(rn.opType);
        expect(n.domain ?? '', nat).toBe(rn.domain);
        expect(n.input ?? [], nat).toEqual(rn.input);
        expect(n.output ?? [], nat).toEqual(rn.output);
        expect(n.attribute?.length ?? 0, nat).toBe(rn.attribute.length);
        (n.attribute ?? []).forEach((a, j) => attr(a, rn.attribute[j], `${nat}.attribute[${j}]`));
      });
      expect(g.initializer?.length ?? 0, at).toBe(r.initializer.length);
      (g.initializer ?? []).forEach((t, i) => tensor(t, r.initializer[i], `${at}.initializer[${i}]`));
      for (const k of ['input', 'output'] as const) {
        expect((g[k] ?? []).map((v) => v.name), at).toEqual(r[k].map((v: any) => v.name));
        (g[k] ?? []).forEach((v, i) => {
          const rt = r[k][i].type?.tensorType;
          if (!rt) return;
          expect(v.type?.tensorType?.elemType ?? 0, at).toBe(rt.elemType);
          expect((v.type?.tensorType?.shape?.dim ?? []).map((d) => d.dimValue ?? d.dimParam ?? null), at)
            .toEqual((rt.shape?.dim ?? []).map((d: any) => d.value === 'dimValue' ? big(d.dimValue) : d.value === 'dimParam' ? d.dimParam : null));
        });
      }
    };
    for (const c of all) {
      const buf = fs.readFileSync(c.model);
      const ours = decodeModel(buf), ref = onnx.ModelProto.decode(buf);
      expect(ours.irVersion, c.name).toBe(big(ref.irVersion));
      expect((ours.opsetImport ?? []).map((o) => [o.domain ?? '', o.version]), c.name)
        .toEqual(ref.opsetImport.map((o: any) => [o.domain, big(o.version)]));
      graph(ours.graph!, ref.graph, c.name);
    }
  });
});

// ---- a hand-written protobuf writer, independent of the codec under test ----
const varint = (v: bigint | number): number[] => {
  let b = BigInt.asUintN(64, BigInt(v));
  const out: number[] = [];
  while (b >= 0x80n) { out.push(Number(b & 0x7fn) | 0x80); b >>= 7n; }
  out.push(Number(b));
  return out;
};
const tag = (no: number, wire: number) => varint(no * 8 + wire);
const vf = (no: number, v: bigint | number) => [...tag(no, 0), ...varint(v)];
const lf = (no: number, payload: number[] | string) => {
  const p = typeof payload === 'string' ? [...Buffer.from(payload)] : payload;
  return [...tag(no, 2), ...varint(p.length), ...p];
};
const f32 = (no: number, bytes: number[]) => [...tag(no, 5), ...bytes];
const f64 = (no: number, bytes: number[]) => [...tag(no, 1), ...bytes];
const floatTensorType = (dims: number[]) => lf(1, [...vf(1, 1), ...lf(2, dims.flatMap((d) => lf(1, vf(1, d))))]);

describe('unknown fields', () => {
  const nodeUnknown = [...vf(99, 5), ...lf(99, 'hello')];
  const graphUnknown = f32(99, [1, 2, 3, 4]);
  const modelUnknown = f64(1000, [1, 2, 3, 4, 5, 6, 7, 8]);
  // Unknown fields last in each message: where a writer in field order puts them back.
  const node = [...lf(1, 'x'), ...lf(2, 'y'), ...lf(3, 'r'), ...lf(4, 'Relu'), ...nodeUnknown];
  const graph = [...lf(1, node), ...lf(2, 'g'), ...lf(11, [...lf(1, 'x'), ...lf(2, floatTensorType([1, 4]))]),
    ...lf(12, [...lf(1, 'y'), ...lf(2, floatTensorType([1, 4]))]), ...graphUnknown];
  const bytes = Uint8Array.from([...vf(1, 8), ...lf(7, graph), ...lf(8, vf(2, 17)), ...modelUnknown]);

  test('survive decode/encode byte for byte, through the IR too', () => {
    const m = decodeModel(bytes);
    expect(m.graph!.node![0].$unknown!.map((u) => [...u])).toEqual([vf(99, 5), lf(99, 'hello')]);
    expect(Buffer.compare(Buffer.from(encodeModel(m)), Buffer.from(bytes))).toBe(0);
    const viaIr = encodeModel(modelToProto(parseModel(bytes)));
    expect(Buffer.compare(Buffer.from(viaIr), Buffer.from(bytes))).toBe(0);
  });

  test('unknownFieldPaths names each', () => {
    expect(unknownFieldPaths(decodeModel(bytes), 'ModelProto').sort())
      .toEqual(['ModelProto#1000', 'ModelProto.graph#99', 'ModelProto.graph.node[0]#99', 'ModelProto.graph.node[0]#99']);
  });

  test('one placed before known fields keeps its bytes (moved to the end)', () => {
    const early = Uint8Array.from([...lf(99, 'early'), ...lf(4, 'Relu')]);
    const n = decodeMessage(early);
    expect(n.opType).toBe('Relu');
    expect([...encodeMessage(n, 'NodeProto')]).toEqual([...lf(4, 'Relu'), ...lf(99, 'early')]);
  });
});
const decodeMessage = (b: Uint8Array) => decodeModel(Uint8Array.from(lf(7, lf(1, [...b])))).graph!.node![0];

describe('int64 extremes', () => {
  const MAX = 2n ** 63n - 1n, MIN = -(2n ** 63n);
  test('attribute ints and int64_data round-trip exactly', () => {
    const t: TensorProto = { dims: BigInt64Array.of(4n), dataType: 7, int64Data: BigInt64Array.of(MAX, MIN, -1n, 0n), name: 'c' };
    const m: ModelProto = {
      irVersion: 8n, opsetImport: [{ version: 17n }],
      graph: {
        node: [{ output: ['c'], opType: 'Constant', attribute: [
          { name: 'value', type: 4, t },
          { name: 'k', type: 7, ints: BigInt64Array.of(MAX, MIN, -1n) }, { name: 'i', type: 2, i: MAX },
        ] }],
        output: [{ name: 'c' }],
      },
      modelVersion: MIN,
    };
    const bytes = encodeModel(m);
    const back = decodeModel(bytes);
    expect(back).toEqual(m);
    expect(Buffer.compare(Buffer.from(encodeModel(back)), Buffer.from(bytes))).toBe(0);
    // INT64_MAX is a 9-byte varint, negatives are 10 bytes (protobuf encoding spec).
    expect(Buffer.from(bytes).includes(Buffer.from([...vf(3, MAX)]))).toBe(true);
    expect(varint(-1n).length).toBe(10);
    // Cross-check with the reference decoder, whose Long keeps all 64 bits.
    const ref = onnx.ModelProto.decode(bytes);
    expect(ref.graph.node[0].attribute[1].ints.map(String)).toEqual([String(MAX), String(MIN), '-1']);
    expect(ref.graph.node[0].attribute[0].t.int64Data.map(String)).toEqual([String(MAX), String(MIN), '-1', '0']);
  });

  test('uint64 beyond int64 and a hand-written 10-byte varint', () => {
    const t: TensorProto = { dims: BigInt64Array.of(2n), dataType: 13, uint64Data: BigUint64Array.of(2n ** 64n - 1n, 2n ** 63n) };
    expect(decodeTensor(encodeMessage(t, 'TensorProto'))).toEqual(t);
    const hand = Uint8Array.from([...vf(1, 1), ...lf(7, varint(MIN)), ...vf(2, 7)]);
    expect(decodeTensor(hand).int64Data).toEqual(BigInt64Array.of(MIN));
  });
});

describe('views', () => {
  test('a large raw_data decodes as a view of the input buffer', () => {
    const n = 1 << 20;
    const raw = new Uint8Array(n * 4).map((_, i) => i * 7);
    const bytes = encodeMessage({ name: 'w', dims: BigInt64Array.of(BigInt(n)), dataType: 1, rawData: raw }, 'TensorProto');
    const t = decodeTensor(bytes);
    expect(t.rawData!.buffer).toBe(bytes.buffer);
    expect(t.rawData!.byteOffset).toBeGreaterThanOrEqual(bytes.byteOffset);
    expect(t.rawData!.byteOffset + t.rawData!.length).toBeLessThanOrEqual(bytes.byteOffset + bytes.length);
    expect(Buffer.compare(Buffer.from(t.rawData!), Buffer.from(raw))).toBe(0);
  });
});

import { describe, it, expect } from 'vitest';
import { eliminateDeadCode } from '../lib/graph/passes.js';
import { foldShapeSubgraphs } from '../lib/shapes/fold.js';
import { inferShapes } from '../lib/shapes/infer.js';
import { modelToProto } from '../lib/graph/ir.js';
import { encodeModel } from '../lib/onnx/codec.js';
import { openSession, runSession, tensorFromData } from '../lib/runtime/ort.js';
import { model, vi, node, int64Tensor, floatTensor } from './helpers/proto.js';

describe('dead-code removal', () => {
  it('drops nodes and initializers no output needs, keeps the inputs', () => {
    const m = model(
      [node('Relu', ['x'], ['a']), node('Add', ['x', 'w'], ['dead']), node('Neg', ['dead'], ['dead2']), node('Abs', ['a'], ['y'])],
      [vi('x', [1, 4])], [vi('y', [1, 4])], [floatTensor('w', [1, 4])],
    );
    const before = structuredClone(m.graph.nodes.map((n) => n.op));
    const g = eliminateDeadCode(m.graph);
    expect(g.nodes.map((n) => n.op)).toEqual(['Relu', 'Abs']);
    expect([...g.initializers.keys()]).toEqual([]);
    expect(g.inputs.map((v) => v.name)).toEqual(['x']);
    expect(m.graph.nodes.map((n) => n.op)).toEqual(before); // the input graph is left alone
  });
});

describe('folding shape subgraphs', () => {
  // The exporter pattern for flatten-by-reshape: Shape → Gather(0) → Unsqueeze → Concat(-1) → Reshape.
  const m = model([
    node('Shape', ['x'], ['s']),
    node('Gather', ['s', 'i0'], ['n'], [{ name: 'axis', type: 2, i: 0n }]),
    node('Unsqueeze', ['n', 'ax'], ['n1']),
    node('Concat', ['n1', 'minus1'], ['target'], [{ name: 'axis', type: 2, i: 0n }]),
    node('Reshape', ['x', 'target'], ['y']),
  ], [vi('x', [1, 3, 4, 4])], [vi('y', [1, 48])], [int64Tensor('i0', [0], []), int64Tensor('ax', [0]), int64Tensor('minus1', [-1])]);

  it('turns the chain into one initializer and leaves only the Reshape', () => {
    const { model: f, folded } = foldShapeSubgraphs(m, inferShapes(m));
    expect(folded).toBe(4);
    expect(f.graph.nodes.map((n) => n.op)).toEqual(['Reshape']);
    const t = f.graph.initializers.get('target')!;
    expect(Array.from(t.int64Data!, Number)).toEqual([1, -1]);
    expect([...f.graph.initializers.keys()]).toEqual(['target']);
  });

  it('computes the same output in onnxruntime', async () => {
    const { model: f } = foldShapeSubgraphs(m, inferShapes(m));
    const x = tensorFromData(1, [1, 3, 4, 4], Float32Array.from({ length: 48 }, (_, i) => i * 0.5 - 3));
    const run = async (mm: typeof m) => {
      const s = await openSession(encodeModel(modelToProto(mm)));
      try { return (await runSession(s, { x }))['y']; } finally { await s.release(); }
    };
    const [a, b] = [await run(m), await run(f)];
    expect(b.dims).toEqual(a.dims);
    expect(Array.from(b.data as Float32Array)).toEqual(Array.from(a.data as Float32Array));
  });
});

import { describe, it, expect } from 'vitest';
import { costModel } from '../lib/cost/report.js';
import { completeShapes, analyzeModel } from '../lib/cost/analyze.js';
import { liveRanges, peakOver } from '../lib/cost/memory.js';
import { model, vi, node, floatTensor } from './helpers/proto.js';

describe('peak activation memory', () => {
  // Worked example (hand-computed): x[1,4] → Relu a → Relu b, and x also feeds Add(b, x) → y.
  // float32, 16 B each. Step 0 (Relu a): x, a live = 32. Step 1 (Relu b): x, a, b = 48.
  // Step 2 (Add): x, b, y = 48. Peak 48 at step 1 (first reached).
  const m = model(
    [node('Relu', ['x'], ['a']), node('Relu', ['a'], ['b']), node('Add', ['b', 'x'], ['y'])],
    [vi('x', [1, 4])], [vi('y', [1, 4])],
  );
  it('follows live ranges over the file order', () => {
    const r = costModel(m);
    expect(r.model.peakActivationBytes).toBe(48n);
    expect(r.model.peakLive.sort()).toEqual(['a', 'b', 'x']);
  });
  it('interval arithmetic matches a brute-force sum', () => {
    const sizes = new Map([['x', 16n], ['a', 16n], ['b', 16n], ['y', 16n]]);
    const nodes = m.graph.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: n.inputs }));
    const ranges = liveRanges([0, 1, 2], nodes, sizes, ['x'], ['y']);
    for (let s = 0; s < 3; s++) {
      const brute = ranges.filter((v) => v.birth <= s && s <= v.death).reduce((a, v) => a + v.bytes, 0n);
      expect(peakOver(ranges, s, s).bytes).toBe(brute);
    }
  });
  it('does not count initializers as activations', () => {
    const w = model([node('Add', ['x', 'w'], ['y'])], [vi('x', [1, 256])], [vi('y', [1, 256])], [floatTensor('w', [1, 256])]);
    const r = costModel(w);
    expect(r.model.peakActivationBytes).toBe(2048n);
    expect(r.model.paramBytes).toBe(1024n);
  });
});

describe('stages', () => {
  // x[1,8] → Gemm(W1 8×8) h → Relu r → Gemm(W1 shared again) z: W1 is read in both stages.
  const W = floatTensor('W', [8, 8]);
  const m = model(
    [node('MatMul', ['x', 'W'], ['h']), node('Relu', ['h'], ['r']), node('MatMul', ['r', 'W'], ['z'])],
    [vi('x', [1, 8])], [vi('z', [1, 8])], [W],
  );
  it('counts a shared weight once in the model and in each stage that reads it', () => {
    const r = costModel(m, { cuts: ['r'] });
    expect(r.model.params).toBe(64n);
    expect(r.stages.map((s) => s.params)).toEqual([64n, 64n]);
    // MatMul [1,8]×[8,8]: M·N·K = 1·8·8 = 64 MACs each (common practice).
    expect(r.stages.map((s) => s.macs)).toEqual([64n, 64n]);
    expect(r.stages[0].outputs).toEqual([{ name: 'r', bytes: 32n }]);
    expect(r.stages[1].inputs).toEqual([{ name: 'r', bytes: 32n }]);
    expect(r.stages[0].macFraction).toBe(0.5);
  });
  it('rejects a cut that names nothing', () => {
    expect(() => costModel(m, { cuts: ['nope'] })).toThrow(/names no value/);
  });
});

describe('symbolic dims', () => {
  const m = model([node('Relu', ['x'], ['y'])], [vi('x', ['N', 'T'])], [vi('y', ['N', 'T'])]);
  it('binds the batch to 1 and asks for the others by name', () => {
    expect(() => costModel(m)).toThrow(/dim 'T'.*--dim T=VALUE/);
    const r = costModel(m, { dims: { T: 10 } });
    expect(r.model.inputs[0].shape).toEqual([1, 10]);
    expect(r.model.peakActivationBytes).toBe(80n);
  });
});

describe('shape fallback', () => {
  it('measures shapes of ops without a static rule in onnxruntime and marks them', async () => {
    // Det has no static rule: [2,3,3] → [2] (ONNX operator spec, Det).
    const m = model([node('Det', ['x'], ['d']), node('Relu', ['d'], ['y'])], [vi('x', [2, 3, 3])], [{ name: 'y', type: { tensorType: { elemType: 1 } } }]);
    const s = await completeShapes(m);
    expect(s.values.get('d')).toMatchObject({ type: { shape: [2] }, source: 'measured' });
    const r = await analyzeModel(m);
    expect(r.shapes.measured).toContain('d');
    expect(r.model.outputs[0].shape).toEqual([2]);
  });
});

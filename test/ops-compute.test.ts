// Compute operator rules: shapes and exact MAC/op counts on hand-worked cases.
// Each case states its arithmetic; "spec" means the ONNX operator spec
// (onnx/onnx docs/Operators.md), "common practice" the usual counting convention,
// "ours" a constant this project chose (documented in the rule file).
import { describe, it, expect } from 'vitest';
import type { AttributeProto, NodeProto, ValueInfoProto } from '../lib/onnx/types.js';
import { inferShapes } from '../lib/shapes/infer.js';
import { costModel } from '../lib/cost/report.js';
import { model, vi, node, ints, int } from './helpers/proto.js';

const float = (name: string, f: number): AttributeProto => ({ name, type: 1, f });
const str = (name: string, s: string): AttributeProto => ({ name, type: 3, s: new TextEncoder().encode(s) });

function run(n: NodeProto, inputs: ValueInfoProto[], opset = 17) {
  const m = model([n], inputs, (n.output ?? []).filter(Boolean).map((name) => ({ name })), [], opset);
  const s = inferShapes(m, { rulesOnly: true, batch: 0 });
  expect(s.failures).toEqual([]);
  return {
    shape: (o: string) => s.values.get(o)?.type.shape,
    dtype: (o: string) => s.values.get(o)?.type.dtype,
    cost: () => { const c = costModel(m, { shapes: s }).nodes[0]; return { macs: c.macs, ops: c.ops }; },
  };
}

describe('Conv', () => {
  it('counts N·Cout·∏out·(Cin/group)·∏k MACs and one op per output for the bias', () => {
    // x[1,3,32,32] * W[16,3,3,3], pads 1, stride 1: out = (32+2-3)/1+1 = 32 (spec).
    // MACs = 1·16·32·32 · 3·3·3 = 16384·27 = 442368 (common practice); bias: 16384 adds.
    const r = run(node('Conv', ['x', 'w', 'b'], ['y'], [ints('pads', [1, 1, 1, 1])]), [vi('x', [1, 3, 32, 32]), vi('w', [16, 3, 3, 3]), vi('b', [16])]);
    expect(r.shape('y')).toEqual([1, 16, 32, 32]);
    expect(r.cost()).toEqual({ macs: 442368n, ops: 16384n });
  });
  it('depthwise with stride 2', () => {
    // x[1,8,16,16], W[8,1,3,3], group 8, pads 1, stride 2: out = floor((16+2-3)/2)+1 = 8.
    // MACs = 1·8·8·8 · (8/8)·9 = 4608; no bias, no ops.
    const r = run(node('Conv', ['x', 'w'], ['y'], [int('group', 8), ints('strides', [2, 2]), ints('pads', [1, 1, 1, 1])]), [vi('x', [1, 8, 16, 16]), vi('w', [8, 1, 3, 3])]);
    expect(r.shape('y')).toEqual([1, 8, 8, 8]);
    expect(r.cost()).toEqual({ macs: 4608n, ops: 0n });
  });
  it('auto_pad and dilations', () => {
    // Input 7, kernel 3, stride 2. SAME_*: ceil(7/2) = 4; VALID: ceil((7-3+1)/2) = 3 (spec).
    for (const [pad, want] of [['SAME_UPPER', 4], ['SAME_LOWER', 4], ['VALID', 3]] as const) {
      const r = run(node('Conv', ['x', 'w'], ['y'], [str('auto_pad', pad), ints('strides', [2])]), [vi('x', [1, 1, 7]), vi('w', [2, 1, 3])]);
      expect(r.shape('y')).toEqual([1, 2, want]);
    }
    // Kernel 3 with dilation 2 spans 5: out = 10-5+1 = 6; MACs = 6·3 = 18 (one channel in and out).
    const d = run(node('Conv', ['x', 'w'], ['y'], [ints('dilations', [2])]), [vi('x', [1, 1, 10]), vi('w', [1, 1, 3])]);
    expect(d.shape('y')).toEqual([1, 1, 6]);
    expect(d.cost().macs).toBe(18n);
  });
  it('keeps a symbolic batch and a size the window cannot change', () => {
    const r = run(node('Conv', ['x', 'w'], ['y'], [str('auto_pad', 'SAME_UPPER')]), [vi('x', ['N', 3, 'H', 'W']), vi('w', [4, 3, 3, 3])]);
    expect(r.shape('y')).toEqual(['N', 4, 'H', 'W']);
  });
  it('rejects a weight that does not fit the channels', () => {
    const m = model([node('Conv', ['x', 'w'], ['y'])], [vi('x', [1, 4, 5, 5]), vi('w', [2, 3, 3, 3])], [{ name: 'y' }]);
    expect(inferShapes(m, { rulesOnly: true }).failures[0].message).toMatch(/input channels/);
  });
});

describe('ConvTranspose', () => {
  it('counts N·Cin·∏in·(Cout/group)·∏k MACs', () => {
    // x[1,2,3,3], W[2,4,3,3], stride 2: out = 2·(3-1) + 0 + 3 - 0 = 7 (spec).
    // MACs = 1·2·3·3 · 4·3·3 = 18·36 = 648 (common practice: each input scatters into Cout/g·∏k outputs).
    const r = run(node('ConvTranspose', ['x', 'w'], ['y'], [ints('strides', [2, 2])]), [vi('x', [1, 2, 3, 3]), vi('w', [2, 4, 3, 3])]);
    expect(r.shape('y')).toEqual([1, 4, 7, 7]);
    expect(r.cost()).toEqual({ macs: 648n, ops: 0n });
  });
  it('output_padding, groups, output_shape and SAME', () => {
    // output_padding 1 adds one: 8. group 2 with W[2,2,3,3]: Cout = 2·2 = 4; MACs = 18·2·9 = 324.
    const g = run(node('ConvTranspose', ['x', 'w', 'b'], ['y'], [ints('strides', [2, 2]), ints('output_padding', [1, 1]), int('group', 2)]),
      [vi('x', [1, 2, 3, 3]), vi('w', [2, 2, 3, 3]), vi('b', [4])]);
    expect(g.shape('y')).toEqual([1, 4, 8, 8]);
    // Bias: one add per output, 4·8·8 = 256.
    expect(g.cost()).toEqual({ macs: 324n, ops: 256n });
    const o = run(node('ConvTranspose', ['x', 'w'], ['y'], [ints('strides', [3, 2]), ints('output_shape', [10, 8])]), [vi('x', [1, 1, 3, 3]), vi('w', [1, 2, 3, 3])]);
    expect(o.shape('y')).toEqual([1, 2, 10, 8]);
    // SAME_*: out = in·stride (spec).
    const s = run(node('ConvTranspose', ['x', 'w'], ['y'], [ints('strides', [2]), str('auto_pad', 'SAME_UPPER')]), [vi('x', [1, 1, 5]), vi('w', [1, 1, 3])]);
    expect(s.shape('y')).toEqual([1, 1, 10]);
  });
});

describe('integer convolutions', () => {
  it('ConvInteger yields int32', () => {
    const r = run(node('ConvInteger', ['x', 'w'], ['y']), [vi('x', [1, 1, 4, 4], 2), vi('w', [1, 1, 2, 2], 2)]);
    expect(r.shape('y')).toEqual([1, 1, 3, 3]);
    expect(r.dtype('y')).toBe(6);
    // 9 outputs × 4 taps = 36 MACs.
    expect(r.cost().macs).toBe(36n);
  });
  it('QLinearConv reads x and w from slots 0 and 3, takes y_zero_point\'s type', () => {
    // x[1,2,5,5] int8, w[3,2,3,3]: out 3×3; MACs = 3·9 · 2·9 = 486; ours: requantise 3 ops + bias 1 per output = 4·27 = 108.
    const r = run(node('QLinearConv', ['x', 'xs', 'xz', 'w', 'ws', 'wz', 'ys', 'yz', 'b'], ['y']), [
      vi('x', [1, 2, 5, 5], 3), vi('xs', []), vi('xz', [], 3), vi('w', [3, 2, 3, 3], 3), vi('ws', []), vi('wz', [], 3),
      vi('ys', []), vi('yz', [], 3), vi('b', [3], 6)]);
    expect(r.shape('y')).toEqual([1, 3, 3, 3]);
    expect(r.dtype('y')).toBe(3);
    expect(r.cost()).toEqual({ macs: 486n, ops: 108n });
  });
});

describe('Gemm and MatMul', () => {
  it('Gemm with transB, alpha and beta', () => {
    // A[4,8], B[16,8] transposed: Y[4,16]; MACs = M·N·K = 4·16·8 = 512 (common practice).
    // alpha 0.5 (1 op), C with beta 2 (2 ops): 3·64 = 192 ops.
    const r = run(node('Gemm', ['a', 'b', 'c'], ['y'], [int('transB', 1), float('alpha', 0.5), float('beta', 2)]), [vi('a', [4, 8]), vi('b', [16, 8]), vi('c', [16])]);
    expect(r.shape('y')).toEqual([4, 16]);
    expect(r.cost()).toEqual({ macs: 512n, ops: 192n });
    // transA: A[8,4] is K×M; defaults alpha = beta = 1, so C costs one add per output.
    const t = run(node('Gemm', ['a', 'b', 'c'], ['y'], [int('transA', 1)]), [vi('a', [8, 4]), vi('b', [8, 16]), vi('c', [4, 16])]);
    expect(t.shape('y')).toEqual([4, 16]);
    expect(t.cost()).toEqual({ macs: 512n, ops: 64n });
  });
  it('MatMul follows numpy for 1-D operands and batch broadcasting', () => {
    // [8]·[8,5] → [5]: 5 dot products of 8 = 40 MACs. [3,4]·[4] → [3]: 12.
    const v = run(node('MatMul', ['a', 'b'], ['y']), [vi('a', [8]), vi('b', [8, 5])]);
    expect(v.shape('y')).toEqual([5]);
    expect(v.cost().macs).toBe(40n);
    const w = run(node('MatMul', ['a', 'b'], ['y']), [vi('a', [3, 4]), vi('b', [4])]);
    expect(w.shape('y')).toEqual([3]);
    expect(w.cost().macs).toBe(12n);
    // [2,1,3,4]·[5,4,6]: batch [2,1]⊕[5] = [2,5]; MACs = 2·5 · 3·6 · 4 = 720.
    const b = run(node('MatMul', ['a', 'b'], ['y']), [vi('a', [2, 1, 3, 4]), vi('b', [5, 4, 6])]);
    expect(b.shape('y')).toEqual([2, 5, 3, 6]);
    expect(b.cost()).toEqual({ macs: 720n, ops: 0n });
  });
  it('integer variants', () => {
    const i = run(node('MatMulInteger', ['a', 'b'], ['y']), [vi('a', [3, 4], 2), vi('b', [4, 2], 2)]);
    expect([i.shape('y'), i.dtype('y'), i.cost().macs]).toEqual([[3, 2], 6, 24n]);
    // QLinearMatMul: a slot 0, b slot 3; 3·2·4 = 24 MACs, 3 requantise ops per output = 18 (ours).
    const q = run(node('QLinearMatMul', ['a', 'as', 'az', 'b', 'bs', 'bz', 'ys', 'yz'], ['y']), [
      vi('a', [3, 4], 2), vi('as', []), vi('az', [], 2), vi('b', [4, 2], 2), vi('bs', []), vi('bz', [], 2), vi('ys', []), vi('yz', [], 2)]);
    expect([q.shape('y'), q.dtype('y')]).toEqual([[3, 2], 2]);
    expect(q.cost()).toEqual({ macs: 24n, ops: 18n });
  });
});

describe('Einsum', () => {
  const es = (eq: string, shapes: number[][], opset = 17) =>
    run(node('Einsum', shapes.map((_, i) => `i${i}`), ['y'], [str('equation', eq)]), shapes.map((s, i) => vi(`i${i}`, s)), opset);
  it('batched matmul: one MAC per point of the b·i·j·k index space', () => {
    // b2 i3 j4 k5: 2·3·4·5 = 120 MACs, the same as MatMul [2,3,4]·[2,4,5] (ours, documented in einsum.ts).
    const r = es('bij,bjk->bik', [[2, 3, 4], [2, 4, 5]]);
    expect(r.shape('y')).toEqual([2, 3, 5]);
    expect(r.cost()).toEqual({ macs: 120n, ops: 0n });
  });
  it('implicit output, ellipsis, three operands', () => {
    // Implicit 'ij,jk': letters used once, sorted → 'ik' (spec).
    expect(es('ij,jk', [[3, 4], [4, 5]]).shape('y')).toEqual([3, 5]);
    // '...' broadcasts [7,1] with [6]: [7,6], placed first in an implicit output.
    expect(es('...ij,...jk', [[7, 1, 3, 4], [6, 4, 5]]).shape('y')).toEqual([7, 6, 3, 5]);
    expect(es('...ii->...i', [[2, 3, 3]]).shape('y')).toEqual([2, 3]);
    // i2 j3 k4 l5: the naive loop nest has 120 points → 120 MACs (ours).
    expect(es('ij,jk,kl->il', [[2, 3], [3, 4], [4, 5]]).cost().macs).toBe(120n);
  });
  it('single operand: sums cost adds, transposes nothing', () => {
    // Trace 'ii' of 4×4: output scalar, 4 index points summed (i is one letter) → 4 ops.
    const t = es('ii', [[4, 4]]);
    expect(t.shape('y')).toEqual([]);
    expect(t.cost()).toEqual({ macs: 0n, ops: 4n });
    expect(es('ij->', [[3, 4]]).cost()).toEqual({ macs: 0n, ops: 12n });
    expect(es('ij->ji', [[3, 4]]).cost()).toEqual({ macs: 0n, ops: 0n });
  });
});

describe('pooling', () => {
  it('MaxPool with Indices, and ceil_mode', () => {
    // 5×5, kernel 3, stride 2: floor((5-3)/2)+1 = 2. Ops = 4 outputs × 9 taps = 36 (common practice).
    const r = run(node('MaxPool', ['x'], ['y', 'i'], [ints('kernel_shape', [3, 3]), ints('strides', [2, 2])]), [vi('x', [1, 1, 5, 5])]);
    expect(r.shape('y')).toEqual([1, 1, 2, 2]);
    expect([r.shape('i'), r.dtype('i')]).toEqual([[1, 1, 2, 2], 7]);
    expect(r.cost()).toEqual({ macs: 0n, ops: 36n });
    // 6, kernel 3, stride 2: floor 2, ceil(3/2)+1 = 3.
    const c = run(node('MaxPool', ['x'], ['y'], [ints('kernel_shape', [3]), ints('strides', [2]), int('ceil_mode', 1)]), [vi('x', [1, 1, 6])]);
    expect(c.shape('y')).toEqual([1, 1, 3]);
    // 4 with end pad 1, kernel 2, stride 2: ceil(3/2)+1 = 3, but the third window starts at 4,
    // entirely in the end padding, so it is dropped (spec reference; common runtimes): 2.
    const d = run(node('MaxPool', ['x'], ['y'], [ints('kernel_shape', [2]), ints('strides', [2]), ints('pads', [0, 1]), int('ceil_mode', 1)]), [vi('x', [1, 1, 4])]);
    expect(d.shape('y')).toEqual([1, 1, 2]);
  });
  it('AveragePool with pads, global pools', () => {
    // 7×7, kernel 3, pads 1, stride 1: 7; ops = 8·49·9 = 3528.
    const a = run(node('AveragePool', ['x'], ['y'], [ints('kernel_shape', [3, 3]), ints('pads', [1, 1, 1, 1]), int('count_include_pad', 1)]), [vi('x', [1, 8, 7, 7])]);
    expect(a.shape('y')).toEqual([1, 8, 7, 7]);
    expect(a.cost().ops).toBe(3528n);
    // Global: [1,8,7,7] → [1,8,1,1]; one op per input element, 392.
    const g = run(node('GlobalAveragePool', ['x'], ['y']), [vi('x', [1, 8, 7, 7])]);
    expect(g.shape('y')).toEqual([1, 8, 1, 1]);
    expect(g.cost()).toEqual({ macs: 0n, ops: 392n });
  });
});

describe('recurrent layers', () => {
  it('bidirectional LSTM: 4·H·(I+H) MACs per step, row and direction', () => {
    // seq 5, batch 2, I 10, H 20, two directions: 4·20·30 · 5·2·2 = 2400·20 = 48000 (common practice).
    // Ops (ours): 28 per unit per step → 28·20·20 = 11200; with bias +8 per unit → 36·400 = 14400.
    const r = run(node('LSTM', ['x', 'w', 'r', 'b'], ['y', 'h', 'c'], [int('hidden_size', 20), str('direction', 'bidirectional')]),
      [vi('x', [5, 2, 10]), vi('w', [2, 80, 10]), vi('r', [2, 80, 20]), vi('b', [2, 160])]);
    expect(r.shape('y')).toEqual([5, 2, 2, 20]);
    expect(r.shape('h')).toEqual([2, 2, 20]);
    expect(r.shape('c')).toEqual([2, 2, 20]);
    expect(r.cost()).toEqual({ macs: 48000n, ops: 14400n });
  });
  it('GRU batch-first, RNN with Y omitted', () => {
    // layout 1: X [batch 3, seq 4, I 6], H from R: 8. Y [3,4,1,8], Y_h [3,1,8].
    // MACs = 3·8·(6+8) · 4·3 = 336·12 = 4032.
    const g = run(node('GRU', ['x', 'w', 'r'], ['y', 'h'], [int('layout', 1)]), [vi('x', [3, 4, 6]), vi('w', [1, 24, 6]), vi('r', [1, 24, 8])]);
    expect(g.shape('y')).toEqual([3, 4, 1, 8]);
    expect(g.shape('h')).toEqual([3, 1, 8]);
    expect(g.cost().macs).toBe(4032n);
    // RNN: H·(I+H) = 8·14 = 112 per step; seq 4 · batch 3 = 12 steps → 1344.
    const n = run(node('RNN', ['x', 'w', 'r'], ['', 'h'], [int('hidden_size', 8)]), [vi('x', [4, 3, 6]), vi('w', [1, 8, 6]), vi('r', [1, 8, 8])]);
    expect(n.shape('h')).toEqual([1, 3, 8]);
    expect(n.cost().macs).toBe(1344n);
  });
});

describe('normalisation and softmax', () => {
  it('BatchNormalization at inference: 2 ops per element; training outputs are per channel', () => {
    const ins = [vi('x', [1, 4, 3, 3]), vi('s', [4]), vi('b', [4]), vi('m', [4]), vi('v', [4])];
    const r = run(node('BatchNormalization', ['x', 's', 'b', 'm', 'v'], ['y']), ins, 15);
    expect(r.cost()).toEqual({ macs: 0n, ops: 72n }); // 36 elements × 2 (ours: folded scale and shift)
    const t = run(node('BatchNormalization', ['x', 's', 'b', 'm', 'v'], ['y', 'rm', 'rv'], [int('training_mode', 1)]), ins, 15);
    expect([t.shape('y'), t.shape('rm'), t.shape('rv')]).toEqual([[1, 4, 3, 3], [4], [4]]);
    expect(t.cost().ops).toBe(252n); // 36 × (3 statistics + 2 normalise + 2 affine)
  });
  it('LayerNormalization statistics keep the leading dims', () => {
    const r = run(node('LayerNormalization', ['x', 's', 'b'], ['y', 'mean', 'inv'], [int('axis', 1)]), [vi('x', [2, 3, 4]), vi('s', [3, 4]), vi('b', [3, 4])]);
    expect([r.shape('y'), r.shape('mean'), r.shape('inv'), r.dtype('mean')]).toEqual([[2, 3, 4], [2, 1, 1], [2, 1, 1], 1]);
    expect(r.cost().ops).toBe(168n); // 24 × 7
  });
  it('Softmax keeps the shape and costs 8 ops per element', () => {
    const r = run(node('Softmax', ['x'], ['y']), [vi('x', [2, 10])]);
    expect(r.shape('y')).toEqual([2, 10]);
    expect(r.cost()).toEqual({ macs: 0n, ops: 160n });
    const m = model([node('Softmax', ['x'], ['y'], [int('axis', 2)])], [vi('x', [2, 10])], [{ name: 'y' }], [], 13);
    expect(inferShapes(m, { rulesOnly: true }).failures[0].message).toMatch(/axis 2 out of range/);
  });
});

describe('quantisation and Dropout', () => {
  it('QuantizeLinear takes the zero point\'s type, else uint8', () => {
    expect(run(node('QuantizeLinear', ['x', 's', 'z'], ['y']), [vi('x', [2, 3]), vi('s', []), vi('z', [], 3)]).dtype('y')).toBe(3);
    const u = run(node('QuantizeLinear', ['x', 's'], ['y']), [vi('x', [2, 3]), vi('s', [])]);
    expect([u.shape('y'), u.dtype('y')]).toEqual([[2, 3], 2]);
    expect(u.cost().ops).toBe(18n); // 6 × 3 (ours)
  });
  it('DequantizeLinear, DynamicQuantizeLinear, Dropout', () => {
    expect(run(node('DequantizeLinear', ['x', 's'], ['y']), [vi('x', [4], 3), vi('s', [])], 13).dtype('y')).toBe(1);
    const d = run(node('DynamicQuantizeLinear', ['x'], ['y', 's', 'z']), [vi('x', [3, 4])]);
    expect([d.shape('y'), d.dtype('y'), d.shape('s'), d.dtype('s'), d.shape('z'), d.dtype('z')]).toEqual([[3, 4], 2, [], 1, [], 2]);
    const p = run(node('Dropout', ['x'], ['y', 'm']), [vi('x', [2, 5])], 13);
    expect([p.shape('m'), p.dtype('m')]).toEqual([[2, 5], 9]);
    expect(p.cost()).toEqual({ macs: 0n, ops: 0n });
    // Before opset 10 the mask has the data's type.
    expect(run(node('Dropout', ['x'], ['y', 'm']), [vi('x', [2, 5])], 7).dtype('m')).toBe(1);
  });
});

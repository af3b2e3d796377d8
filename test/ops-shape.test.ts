// Data-movement and shape-arithmetic rules: the folding that keeps exporter
// shape chains static, Reshape's 0/-1, Slice's clamping, and a few folds that
// feed them. Expected values are worked from the ONNX operator spec.
import { describe, it, expect } from 'vitest';
import type { AttributeProto, NodeProto, TensorProto, ValueInfoProto } from '../lib/onnx/types.js';
import { inferShapes, type InferOptions } from '../lib/shapes/infer.js';
import { costModel } from '../lib/cost/report.js';
import { model, vi, node, ints, int, int64Tensor } from './helpers/proto.js';

const I64_MAX = 9223372036854775807n, I64_MIN = -9223372036854775808n;
const i64 = (name: string, data: bigint[], dims = [data.length]): TensorProto =>
  ({ name, dims: BigInt64Array.from(dims.map(BigInt)), dataType: 7, int64Data: BigInt64Array.from(data) });
const tensorAttr = (name: string, t: TensorProto): AttributeProto => ({ name, type: 4, t });

function run(nodes: NodeProto[], inputs: ValueInfoProto[], inits: TensorProto[] = [], opset = 17, opts: InferOptions = {}) {
  const outs = nodes.flatMap((n) => n.output ?? []).map((name) => ({ name }));
  const s = inferShapes(model(nodes, inputs, outs, inits, opset), { rulesOnly: true, batch: 0, ...opts });
  return {
    failures: s.failures,
    shape: (v: string) => s.values.get(v)?.type.shape,
    value: (v: string) => s.values.get(v)?.value,
    dtype: (v: string) => s.values.get(v)?.type.dtype,
  };
}

describe('folding chain Shape→Gather→Unsqueeze→Concat→Reshape', () => {
  // What exporters write for x.view(x.size(0), -1): the target is computed, not stored.
  const chain = (opset: number) => [
    node('Shape', ['x'], ['s']),
    node('Gather', ['s', 'zero'], ['n'], [int('axis', 0)]),
    opset >= 13 ? node('Unsqueeze', ['n', 'ax0'], ['n1']) : node('Unsqueeze', ['n'], ['n1'], [ints('axes', [0])]),
    node('Concat', ['n1', 'minus1'], ['target'], [int('axis', 0)]),
    node('Reshape', ['x', 'target'], ['y']),
  ];
  const inits = [int64Tensor('zero', [0], []), int64Tensor('ax0', [0]), int64Tensor('minus1', [-1])];

  for (const opset of [11, 13, 17]) {
    it(`folds to a static shape at opset ${opset}`, () => {
      const r = run(chain(opset), [vi('x', [2, 3, 4, 5])], inits, opset);
      expect(r.failures).toEqual([]);
      expect(r.value('s')).toEqual({ dtype: 7, dims: [4], data: [2, 3, 4, 5] });
      // A scalar index drops the axis: a 0-D value.
      expect(r.value('n')).toEqual({ dtype: 7, dims: [], data: [2] });
      expect(r.value('n1')).toEqual({ dtype: 7, dims: [1], data: [2] });
      expect(r.value('target')).toEqual({ dtype: 7, dims: [2], data: [2, -1] });
      // -1 takes the rest: 2·3·4·5 / 2 = 60.
      expect(r.shape('y')).toEqual([2, 60]);
    });
  }

  it('a symbolic batch bound by the options folds too', () => {
    const r = run(chain(17), [vi('x', ['N', 3, 4, 5])], inits, 17, { dims: { N: 8 } });
    expect(r.shape('y')).toEqual([8, 60]);
  });

  it('an unbound symbol stops the fold but not Reshape [0,-1]', () => {
    const r = run([...chain(17), node('Reshape', ['x', 'keep0'], ['z'])], [vi('x', ['N', 3, 4, 5])], [...inits, int64Tensor('keep0', [0, -1])]);
    expect(r.shape('s')).toEqual([4]);
    expect(r.value('s')).toBeUndefined();
    expect(r.shape('y')).toBeUndefined();
    // N·3·4·5 / N cancels the symbol: 60.
    expect(r.shape('z')).toEqual(['N', 60]);
  });

  it('Shape start/end (opset 15) then ReduceProd folds a flattened size', () => {
    const r = run([
      node('Shape', ['x'], ['tail'], [int('start', 1)]),
      node('ReduceProd', ['tail'], ['k'], [int('keepdims', 1)]),
      node('Concat', ['minus1', 'k'], ['t'], [int('axis', 0)]),
      node('Reshape', ['x', 't'], ['y']),
    ], [vi('x', [2, 3, 4, 5])], [int64Tensor('minus1', [-1])], 15);
    expect(r.value('tail')?.data).toEqual([3, 4, 5]);
    expect(r.value('k')).toEqual({ dtype: 7, dims: [1], data: [60] });
    expect(r.shape('y')).toEqual([2, 60]);
  });

  it('Constant, Cast and ConstantOfShape carry values through', () => {
    const r = run([
      node('Constant', [], ['c'], [tensorAttr('value', int64Tensor('', [2, 3]))]),
      node('Cast', ['c'], ['cf'], [int('to', 1)]),
      node('Mul', ['cf', 'half'], ['h']),
      node('Cast', ['h'], ['hi'], [int('to', 7)]),
      node('ConstantOfShape', ['c'], ['z']),
    ], [], [{ name: 'half', dims: BigInt64Array.of(), dataType: 1, floatData: Float32Array.of(1.5) }]);
    expect(r.value('cf')).toEqual({ dtype: 1, dims: [2], data: [2, 3] });
    // 3 and 4.5 truncate to 3 and 4 on the way back to int64.
    expect(r.value('hi')).toEqual({ dtype: 7, dims: [2], data: [3, 4] });
    expect(r.shape('z')).toEqual([2, 3]);
    expect(r.dtype('z')).toBe(1);
  });
});

describe('Reshape 0 and -1', () => {
  const reshape = (x: (number | string)[], target: number[], opset = 17, attrs: AttributeProto[] = []) =>
    run([node('Reshape', ['x', 't'], ['y'], attrs)], [vi('x', x)], [int64Tensor('t', target)], opset);

  it('0 copies the input dim at the same index, -1 takes the rest', () => {
    expect(reshape([2, 3, 4], [0, -1]).shape('y')).toEqual([2, 12]);
    expect(reshape([2, 3, 4], [-1, 4]).shape('y')).toEqual([6, 4]);
    expect(reshape([2, 3, 4], [0, 0, -1]).shape('y')).toEqual([2, 3, 4]);
    expect(reshape([2, 3, 4], [4, 0, -1]).shape('y')).toEqual([4, 3, 2]);
    expect(reshape([2, 3, 4], [-1]).shape('y')).toEqual([24]);
  });

  it('allowzero=1 (opset 14) makes 0 a zero-sized dim; before 14 the attribute does not exist', () => {
    expect(reshape([0, 3], [3, 0], 14, [int('allowzero', 1)]).shape('y')).toEqual([3, 0]);
    expect(reshape([2, 3], [3, 0], 14).shape('y')).toEqual([3, 3]);
    expect(reshape([2, 3], [0, 3], 13, [int('allowzero', 1)]).shape('y')).toEqual([2, 3]);
  });

  it('opset 1-4 reads the shape attribute', () => {
    const r = run([node('Reshape', ['x'], ['y'], [ints('shape', [0, -1])])], [vi('x', [2, 3, 4])], [], 4);
    expect(r.shape('y')).toEqual([2, 12]);
  });

  it('two -1 or an indivisible size are failures, not guesses', () => {
    expect(reshape([2, 3, 4], [-1, -1]).failures).toHaveLength(1);
    expect(reshape([2, 3, 4], [5, -1]).failures).toHaveLength(1);
  });

  it('a folded input keeps its values', () => {
    const r = run([node('Reshape', ['c', 't'], ['y'])], [], [int64Tensor('c', [1, 2, 3, 4, 5, 6]), int64Tensor('t', [-1, 2])]);
    expect(r.value('y')).toEqual({ dtype: 7, dims: [3, 2], data: [1, 2, 3, 4, 5, 6] });
  });
});

describe('Slice clamping', () => {
  const slice = (x: (number | string)[], starts: bigint[], ends: bigint[], axes?: bigint[], steps?: bigint[]) => run(
    [node('Slice', ['x', 'st', 'en', axes ? 'ax' : '', steps ? 'sp' : ''], ['y'])], [vi('x', x)],
    [i64('st', starts), i64('en', ends), ...(axes ? [i64('ax', axes)] : []), ...(steps ? [i64('sp', steps)] : [])]);

  it('INT64_MAX and far-out indices clamp to the dim', () => {
    expect(slice([10, 5], [1n], [I64_MAX]).shape('y')).toEqual([9, 5]);
    expect(slice([10, 5], [-100n], [100n]).shape('y')).toEqual([10, 5]);
    expect(slice([10, 5], [2n], [1000n], [1n]).shape('y')).toEqual([10, 3]);
    // start past the end: empty.
    expect(slice([10, 5], [20n], [30n]).shape('y')).toEqual([0, 5]);
  });

  it('negative indices count from the end; negative steps clamp to [-1, dim-1]', () => {
    expect(slice([10, 5], [-3n], [-1n]).shape('y')).toEqual([2, 5]);
    // Reverse the whole axis: start -1 (=9), end INT64_MIN clamps to -1: 10 elements.
    expect(slice([10, 5], [-1n], [I64_MIN], [0n], [-1n]).shape('y')).toEqual([10, 5]);
    // 9, 7, 5, 3, 1 (end 0 excluded): ceil((0-9)/-2) = 5.
    expect(slice([10, 5], [100n], [0n], [0n], [-2n]).shape('y')).toEqual([5, 5]);
    expect(slice([10, 5], [0n, 1n], [I64_MAX, I64_MAX], [-2n, -1n], [3n, 2n]).shape('y')).toEqual([4, 2]);
  });

  it('folds the picked values (a dim out of a Shape)', () => {
    const r = run([node('Shape', ['x'], ['s']), node('Slice', ['s', 'st', 'en'], ['hw'])], [vi('x', [1, 3, 32, 24])],
      [i64('st', [-2n]), i64('en', [I64_MAX])]);
    expect(r.value('hw')).toEqual({ dtype: 7, dims: [2], data: [32, 24] });
    const rev = run([node('Slice', ['c', 'st', 'en', '', 'sp'], ['y'])], [],
      [int64Tensor('c', [1, 2, 3, 4]), i64('st', [I64_MAX]), i64('en', [I64_MIN]), i64('sp', [-2n])]);
    expect(rev.value('y')?.data).toEqual([4, 2]);
  });

  it('opset 1-9 reads starts/ends/axes attributes', () => {
    const r = run([node('Slice', ['x'], ['y'], [ints('starts', [1, 0]), ints('ends', [3, -1]), ints('axes', [0, 2])])], [vi('x', [4, 5, 6])], [], 9);
    expect(r.shape('y')).toEqual([2, 5, 5]);
  });

  it('a symbolic dim keeps an open-ended forward slice', () => {
    expect(slice(['N', 5], [1n], [I64_MAX]).shape('y')).toEqual(['N-1', 5]);
  });
});

describe('other folds exporters rely on', () => {
  it('Squeeze, Split and Range fold', () => {
    const r = run([
      node('Shape', ['x'], ['s']),
      node('Split', ['s', 'parts'], ['a', 'b'], [int('axis', 0)]),
      node('Squeeze', ['a', 'ax0'], ['a0']),
      node('Range', ['zero', 'a0', 'one'], ['r']),
    ], [vi('x', [3, 4, 5])], [int64Tensor('parts', [1, 2]), int64Tensor('ax0', [0]), int64Tensor('zero', [0], []), int64Tensor('one', [1], [])]);
    expect(r.value('b')?.data).toEqual([4, 5]);
    expect(r.value('a0')).toEqual({ dtype: 7, dims: [], data: [3] });
    expect(r.value('r')).toEqual({ dtype: 7, dims: [3], data: [0, 1, 2] });
  });

  it('Transpose and Expand fold; data-dependent NonZero gets a fresh dim', () => {
    const r = run([
      node('Transpose', ['c'], ['t']),
      node('Expand', ['v', 'shp'], ['e']),
      node('NonZero', ['x'], ['nz']),
    ], [vi('x', [2, 3])], [int64Tensor('c', [1, 2, 3, 4, 5, 6], [2, 3]), int64Tensor('v', [7, 8], [2, 1]), int64Tensor('shp', [2, 3])]);
    expect(r.value('t')).toEqual({ dtype: 7, dims: [3, 2], data: [1, 4, 2, 5, 3, 6] });
    expect(r.value('e')).toEqual({ dtype: 7, dims: [2, 3], data: [7, 7, 7, 8, 8, 8] });
    const nz = r.shape('nz')!;
    expect(nz[0]).toBe(2);
    expect(typeof nz[1]).toBe('string');
  });
});

describe('costs', () => {
  it('data movement is free; reductions count one op per input element; linear resize one MAC per tap', () => {
    const str = (name: string, v: string): AttributeProto => ({ name, type: 3, s: new TextEncoder().encode(v) });
    const nodes = [
      node('Transpose', ['x'], ['t'], [ints('perm', [0, 1, 3, 2])]),
      node('ReduceMean', ['t'], ['m'], [ints('axes', [2, 3])]),
      node('Resize', ['x', '', 'sc'], ['up'], [str('mode', 'linear')]),
      node('Resize', ['x', '', 'sc'], ['nn']),
    ];
    const m = model(nodes, [vi('x', [1, 2, 4, 4])], [{ name: 'm' }, { name: 'up' }, { name: 'nn' }],
      [{ name: 'sc', dims: BigInt64Array.of(4n), dataType: 1, floatData: Float32Array.of(1, 1, 2, 2) }], 17);
    const s = inferShapes(m, { rulesOnly: true, batch: 0 });
    expect(s.values.get('m')?.type.shape).toEqual([1, 2, 1, 1]);
    expect(s.values.get('up')?.type.shape).toEqual([1, 2, 8, 8]);
    const c = costModel(m, { shapes: s }).nodes.map((n) => [n.macs, n.ops]);
    // 1·2·4·4 = 32 input elements; bilinear: 1·2·8·8 = 128 outputs × 2² taps = 512 MACs.
    expect(c).toEqual([[0n, 0n], [0n, 32n], [512n, 0n], [0n, 0n]]);
  });
});

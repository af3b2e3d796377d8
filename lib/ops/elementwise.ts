// Elementwise operators: unary activations keep shape and type; binary and
// variadic ones broadcast (numpy rules); comparisons yield bool. Integer shape
// arithmetic folds so Reshape targets computed from Shape stay static.
import type { OpRule, InferCtx, Known } from './rule.js';
import { broadcast, perOutput, known, like, shapeOf } from './rule.js';
import { foldElementwise, isIntType } from './fold.js';
import { BOOL } from '../onnx/dtype.js';

const unary = (op: string, opsPerElem = 1n, fold?: (x: number) => number): OpRule => ({
  op,
  infer: (c) => {
    const x = c.inputs[0];
    if (!x) return [];
    const v = fold && x.value ? foldElementwise(x.type.dtype, [x.value], fold) : undefined;
    return [known(x.type.dtype, x.type.shape, v)];
  },
  cost: perOutput(opsPerElem),
});

// Operations per element are rough (common practice: one per simple op, a few for
// transcendental ones); they are reported apart from MACs and never mixed in.
export const UNARY: [string, bigint][] = [
  ['Relu', 1n], ['Sigmoid', 4n], ['Tanh', 4n], ['HardSigmoid', 3n], ['HardSwish', 4n], ['LeakyRelu', 2n], ['Elu', 4n],
  ['Selu', 4n], ['Celu', 4n], ['Gelu', 8n], ['Mish', 8n], ['Softplus', 4n], ['Softsign', 3n], ['ThresholdedRelu', 1n],
  ['Exp', 4n], ['Log', 4n], ['Sqrt', 2n], ['Erf', 8n], ['Reciprocal', 1n], ['Sin', 4n], ['Cos', 4n], ['Tan', 4n],
  ['Asin', 4n], ['Acos', 4n], ['Atan', 4n], ['Sinh', 4n], ['Cosh', 4n], ['Asinh', 4n], ['Acosh', 4n], ['Atanh', 4n],
  ['Shrink', 2n], ['BitwiseNot', 1n],
];
const FOLDING: [string, (x: number) => number][] = [
  ['Neg', (x) => -x], ['Abs', Math.abs], ['Ceil', Math.ceil], ['Floor', Math.floor], ['Sign', Math.sign],
  ['Round', (x) => { const r = Math.round(x); return Math.abs(x % 1) === 0.5 && r % 2 !== 0 ? r - 1 : r; }],
  ['Not', (x) => (x ? 0 : 1)],
];

// IsNaN/IsInf keep the shape but answer in bool.
const test = (op: string): OpRule => ({ op, infer: (c) => [c.inputs[0] && known(BOOL, c.inputs[0].type.shape)], cost: perOutput(1n) });

const binary = (op: string, fn?: (a: number, b: number) => number, outType?: number, opsPerElem = 1n): OpRule => ({
  op,
  infer: (c) => {
    const [a, b] = c.inputs;
    if (!a || !b) return [];
    const dt = outType ?? a.type.dtype;
    const shape = broadcast(a.type.shape, b.type.shape);
    if (!shape) return [];
    const v = fn && a.value && b.value ? foldElementwise(dt, [a.value, b.value], fn) : undefined;
    return [known(dt, shape, v)];
  },
  cost: perOutput(opsPerElem),
});

const intDiv = (a: number, b: number) => Math.trunc(a / b);
const variadic = (op: string, fn: (...v: number[]) => number): OpRule => ({
  op,
  infer: (c) => {
    const xs = c.inputs;
    if (!xs.length || xs.some((x) => !x)) return [];
    const shape = broadcast(...xs.map((x) => x!.type.shape));
    if (!shape) return [];
    const dt = xs[0]!.type.dtype;
    const v = xs.every((x) => x!.value) ? foldElementwise(dt, xs.map((x) => x!.value), fn) : undefined;
    return [known(dt, shape, v)];
  },
  cost: (c) => perOutput(BigInt(Math.max(1, c.inputs.length - 1)))(c),
});

function divRule(): OpRule {
  return {
    op: 'Div',
    infer: (c) => {
      const [a, b] = c.inputs;
      if (!a || !b) return [];
      const shape = broadcast(a.type.shape, b.type.shape);
      if (!shape) return [];
      const fn = isIntType(a.type.dtype) ? intDiv : (x: number, y: number) => x / y;
      const v = a.value && b.value ? foldElementwise(a.type.dtype, [a.value, b.value], fn) : undefined;
      return [known(a.type.dtype, shape, v)];
    },
    cost: perOutput(1n),
  };
}

const where: OpRule = {
  op: 'Where',
  infer: (c) => {
    const [cond, x, y] = c.inputs;
    if (!cond || !x || !y) return [];
    const shape = broadcast(cond.type.shape, x.type.shape, y.type.shape);
    if (!shape) return [];
    const v = cond.value && x.value && y.value ? foldElementwise(x.type.dtype, [cond.value, x.value, y.value], (p, a, b) => (p ? a : b)) : undefined;
    return [known(x.type.dtype, shape, v)];
  },
  cost: perOutput(1n),
};

// Clip: min/max are attributes before opset 11 and optional inputs after; shape is the input's either way.
const clip: OpRule = { op: 'Clip', infer: (c) => [like(c, 0)], cost: perOutput(2n) };

const prelu: OpRule = {
  op: 'PRelu',
  infer: (c) => {
    const x = c.inputs[0];
    if (!x) return [];
    // Since opset 7 the slope broadcasts to X (unidirectionally); output has X's shape.
    return [known(x.type.dtype, broadcast(x.type.shape, shapeOf(c, 1)) ?? x.type.shape)];
  },
  cost: perOutput(2n),
};

const bitShift: OpRule = binary('BitShift');
const cmp = (op: string, fn: (a: number, b: number) => number) => binary(op, fn, BOOL);
const modRule: OpRule = {
  op: 'Mod',
  infer: (c) => {
    const [a, b] = c.inputs;
    if (!a || !b) return [];
    const fmod = c.int('fmod', 0) === 1;
    const fn = fmod ? (x: number, y: number) => x % y : (x: number, y: number) => { const r = x % y; return r !== 0 && (r < 0) !== (y < 0) ? r + y : r; };
    const shape = broadcast(a.type.shape, b.type.shape);
    return shape ? [known(a.type.dtype, shape, a.value && b.value ? foldElementwise(a.type.dtype, [a.value, b.value], fn) : undefined)] : [];
  },
  cost: perOutput(1n),
};

function identityLike(op: string): OpRule {
  return { op, infer: (c: InferCtx): (Known | undefined)[] => [c.inputs[0] && { ...c.inputs[0] }] };
}

export const rules: OpRule[] = [
  ...UNARY.map(([op, k]) => unary(op, k)),
  ...FOLDING.map(([op, fn]) => unary(op, 1n, fn)),
  binary('Add', (a, b) => a + b), binary('Sub', (a, b) => a - b), binary('Mul', (a, b) => a * b), divRule(),
  binary('Pow', (a, b) => a ** b, undefined, 4n),
  binary('And', (a, b) => +(!!a && !!b), BOOL), binary('Or', (a, b) => +(!!a || !!b), BOOL), binary('Xor', (a, b) => +(!!a !== !!b), BOOL),
  binary('BitwiseAnd', (a, b) => a & b), binary('BitwiseOr', (a, b) => a | b), binary('BitwiseXor', (a, b) => a ^ b),
  cmp('Equal', (a, b) => +(a === b)), cmp('Less', (a, b) => +(a < b)), cmp('Greater', (a, b) => +(a > b)),
  cmp('LessOrEqual', (a, b) => +(a <= b)), cmp('GreaterOrEqual', (a, b) => +(a >= b)),
  variadic('Max', Math.max), variadic('Min', Math.min), variadic('Sum', (...v) => v.reduce((s, x) => s + x, 0)),
  variadic('Mean', (...v) => v.reduce((s, x) => s + x, 0) / v.length),
  test('IsNaN'), test('IsInf'),
  where, clip, prelu, bitShift, modRule, identityLike('Identity'),
];

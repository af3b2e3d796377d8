// Quantisation boundaries and Dropout: shapes pass through, element types change.
// Ops per element (common practice): quantise 3 (scale, round, add zero point with
// saturation), dequantise 2 (subtract zero point, scale), dynamic quantise 5
// (min and max pass 2, then quantise 3). Dropout is the identity at inference.
import type { OpRule, InferCtx } from './rule.js';
import { known, perOutput, numel, shapeOf } from './rule.js';
import { BOOL, FLOAT, UINT8 } from '../onnx/dtype.js';

const passShape = (c: InferCtx, dtype: number | undefined) => {
  const x = c.inputs[0];
  return x && dtype !== undefined ? [known(dtype, x.type.shape)] : [];
};

// y takes y_zero_point's type; without one it is uint8, or from opset 21 the
// output_dtype attribute when that is set (0 means unset).
const quantize = (since: number): OpRule => ({
  op: 'QuantizeLinear', since,
  infer: (c) => passShape(c, c.inputs[2]?.type.dtype ?? ((since >= 21 && c.int('output_dtype', 0)) || UINT8)),
  cost: perOutput(3n),
});

// y is float32 until opset 19, then x_scale's type (float16, bfloat16 allowed);
// opset 23 adds an explicit output_dtype.
const dequantize = (since: number): OpRule => ({
  op: 'DequantizeLinear', since,
  infer: (c) => passShape(c, since >= 19 ? (c.int('output_dtype', 0) || c.inputs[1]?.type.dtype) ?? FLOAT : FLOAT),
  cost: perOutput(2n),
});

// Outputs: y (uint8, x's shape), y_scale (float scalar), y_zero_point (uint8 scalar).
const dynamicQuantize: OpRule = {
  op: 'DynamicQuantizeLinear', since: 11,
  infer: (c) => {
    const x = shapeOf(c, 0);
    return x ? [known(UINT8, x), known(FLOAT, []), known(UINT8, [])] : [];
  },
  cost: (c) => ({ macs: 0n, ops: 5n * numel(c.inputs[0]!) }),
};

// mask is data's type before opset 10 and bool after; ratio and training_mode move
// from attributes to inputs in opset 12, which leaves shapes alone.
const dropout = (since: number): OpRule => ({
  op: 'Dropout', since,
  infer: (c) => {
    const x = c.inputs[0];
    if (!x) return [];
    return [known(x.type.dtype, x.type.shape), ...(c.node.outputs[1] ? [known(since >= 10 ? BOOL : x.type.dtype, x.type.shape)] : [])];
  },
});

export const rules: OpRule[] = [
  quantize(10), quantize(21), dequantize(10), dequantize(19), dynamicQuantize, dropout(1), dropout(10),
];

// Elementwise activations as 256-entry int8 tables, computed when the tables are written: for each
// int8 input q, DequantizeLinear's float32 value (q − z_x)·s_x, the function as the ONNX operator
// definitions give it, then QuantizeLinear with the output's parameters and the fused clamp. The
// device only indexes (offramp_lut in offramp_eltwise.c).
import { OfframpError } from '../errors.js';
import { quantizeValue } from './requant.js';

const f32 = Math.fround;

/** The ONNX definition of each unary activation the firmware tables (float32 in, float32 out). */
export type Unary = (x: number) => number;
export function unaryOf(op: string, attr: { float(name: string, d: number): number }): Unary | undefined {
  switch (op) {
    // Sigmoid: 1 / (1 + exp(-x)); Tanh: (exp(2x) − 1) / (exp(2x) + 1) (ONNX operator spec)
    case 'Sigmoid': return (x) => f32(1 / (1 + Math.exp(-x)));
    case 'Tanh': return (x) => f32(Math.tanh(x));
    // HardSigmoid: max(0, min(1, alpha·x + beta)), alpha 0.2 and beta 0.5 by default
    case 'HardSigmoid': {
      const alpha = f32(attr.float('alpha', 0.2)), beta = f32(attr.float('beta', 0.5));
      return (x) => Math.max(0, Math.min(1, f32(f32(alpha * x) + beta)));
    }
    // HardSwish: x · max(0, min(1, x/6 + 1/2)), i.e. x · HardSigmoid(x) with alpha 1/6, beta 0.5
    case 'HardSwish': {
      const alpha = f32(1 / 6);
      return (x) => f32(x * Math.max(0, Math.min(1, f32(f32(alpha * x) + 0.5))));
    }
    // LeakyRelu: x for x ≥ 0, alpha·x below, alpha 0.01 by default
    case 'LeakyRelu': {
      const alpha = f32(attr.float('alpha', 0.01));
      return (x) => (x >= 0 ? x : f32(alpha * x));
    }
    default: return undefined;
  }
}

export interface Q8 { scale: number; zeroPoint: number }

/** table[q + 128] = clamp(QuantizeLinear(fn(DequantizeLinear(q)))), q = −128 … 127. */
export function activationTable(fn: Unary, x: Q8, y: Q8, lo = -128, hi = 127): Int8Array {
  if (!(x.scale > 0) || !(y.scale > 0)) throw new OfframpError('data', `activation table: scales must be positive (${x.scale}, ${y.scale})`);
  return Int8Array.from({ length: 256 }, (_, i) => {
    const v = quantizeValue(fn(f32(f32(i - 128 - x.zeroPoint) * f32(x.scale))), y.scale, y.zeroPoint);
    return v < lo ? lo : v > hi ? hi : v;
  });
}

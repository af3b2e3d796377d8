// Which axes of a rank-3 cut are channels: read from the graph, not guessed from the rank alone.
// Convolutional nets hand on [N, C, L] (Conv1d, pooling); token models (transformer encoders, attention)
// hand on [N, T, D], features last, made by MatMul/Gemm and normalised by LayerNormalization over D. A
// head pooling a LayerNorm output over D averages a value that is constant by construction (mean 0 per
// token, ONNX LayerNormalization), so every sample looks alike and the head can only predict the majority.
import type { Model, Node } from '../graph/ir.js';
import type { Layout } from './spec.js';

/** Ops that fix the layout of what they make: features last, or channels second. */
const FEATURES_LAST = new Set(['MatMul', 'Gemm', 'LayerNormalization', 'Attention', 'MultiHeadAttention', 'SkipLayerNormalization', 'EmbedLayerNormalization', 'Gather']);
const CHANNELS_FIRST = new Set(['Conv', 'ConvTranspose', 'MaxPool', 'AveragePool', 'LpPool', 'BatchNormalization', 'InstanceNormalization', 'GlobalAveragePool', 'GlobalMaxPool']);
/** Ops through which the layout passes unchanged (elementwise, activations, dropout). */
const KEEPS = new Set(['Add', 'Sub', 'Mul', 'Div', 'Relu', 'LeakyRelu', 'Gelu', 'FastGelu', 'Tanh', 'Sigmoid', 'Erf', 'Pow', 'Sqrt', 'Clip', 'Dropout', 'Identity', 'Softmax', 'HardSigmoid', 'HardSwish', 'Elu', 'Selu', 'Cast']);

/**
 * The layout of a rank-3 value, from the nearest op behind it that decides one (a Transpose swapping the
 * last two axes flips it), or undefined when nothing decides it (the rank's default applies).
 */
export function inferLayout(model: Model, value: string): Extract<Layout, 'NCL' | 'NTD'> | undefined {
  const made = new Map<string, Node>();
  for (const n of model.graph.nodes) for (const o of n.outputs) made.set(o, n);
  const seen = new Set<string>();
  const walk = (v: string, depth: number): 'NCL' | 'NTD' | undefined => {
    if (depth > 64 || seen.has(v)) return undefined;
    seen.add(v);
    const n = made.get(v);
    if (!n) return undefined;
    if (FEATURES_LAST.has(n.op)) return 'NTD';
    if (CHANNELS_FIRST.has(n.op)) return 'NCL';
    if (n.op === 'Transpose') {
      const ints = n.attrs.get('perm')?.ints;
      const perm = ints ? Array.from(ints as ArrayLike<number | bigint>, Number) : undefined;
      const inner = walk(n.inputs[0], depth + 1);
      if (!inner || !perm || perm.join() === '0,1,2') return inner;
      return perm.join() === '0,2,1' ? (inner === 'NCL' ? 'NTD' : 'NCL') : undefined;
    }
    if (!KEEPS.has(n.op)) return undefined;
    for (const i of n.inputs) {
      if (!i || model.graph.initializers.has(i)) continue;
      const l = walk(i, depth + 1);
      if (l) return l;
    }
    return undefined;
  };
  return walk(value, 0);
}

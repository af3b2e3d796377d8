// Normalisations keep the input's shape. Costs are ops per input element, from a
// plain two-pass kernel (common practice; per-group square roots are negligible):
//   statistics 3 (accumulate x; accumulate (x-μ)², a subtract and a multiply-add),
//   normalise  2 (subtract μ, multiply by 1/σ),
//   affine     2 (scale, bias) where the op has them.
// Inference BatchNormalization uses stored statistics folded into one per-channel
// scale and shift: 2 ops per element.
import type { Dim } from '../graph/ir.js';
import type { OpRule, Known, CostCtx } from './rule.js';
import { axis, known, like, numel, shapeOf } from './rule.js';

const STATS = 3n, NORMALISE = 2n, AFFINE = 2n;
const perInput = (k: bigint) => (c: CostCtx) => ({ macs: 0n, ops: k * numel(c.inputs[0]!) });
const keep = (op: string, k: bigint, since?: number): OpRule => ({ op, ...(since === undefined ? {} : { since }), infer: (c) => [like(c, 0)], cost: perInput(k) });

// Extra outputs are the per-channel statistics: (running) mean and variance, and
// before opset 14 also saved mean and variance; all shaped like input_mean (which
// is [C], or C×spatial with the pre-opset-9 `spatial=0`) and of its type (T2 from 15).
const batchNorm: OpRule = {
  op: 'BatchNormalization',
  infer: (c) => [like(c, 0), ...c.node.outputs.slice(1).map((o) => (o ? like(c, 3) : undefined))],
  cost: (c) => {
    const training = c.opset >= 14 ? c.int('training_mode', 0) !== 0 : c.outputs.length > 1 && c.int('is_test', 0) === 0;
    return perInput(training ? STATS + NORMALISE + AFFINE : 2n)(c);
  },
};

// Mean and InvStdDev keep the leading dims and collapse the normalised ones to 1;
// their type is stash_type (float by default).
const layerNorm: OpRule = {
  op: 'LayerNormalization',
  since: 17,
  infer: (c) => {
    const x = shapeOf(c, 0), y = like(c, 0);
    if (!x || !y) return [y];
    const a = axis(c.int('axis', -1), x.length);
    const stat: Dim[] = x.map((d, i) => (i < a ? d : 1));
    const st = c.int('stash_type', 1);
    return [y, ...c.node.outputs.slice(1, 3).map((o): Known | undefined => (o ? known(st, stat) : undefined))];
  },
  cost: (c) => perInput(STATS + NORMALISE + (c.inputs[2] ? AFFINE : AFFINE / 2n))(c),
};

// LRN: each element sums `size` squares across channels, then scales, adds bias,
// raises to beta and divides (4 ops).
const lrn: OpRule = {
  op: 'LRN',
  infer: (c) => [like(c, 0)],
  cost: (c) => perInput(BigInt(c.int('size', 1)) + 4n)(c),
};

export const rules: OpRule[] = [
  batchNorm, layerNorm, lrn,
  keep('InstanceNormalization', STATS + NORMALISE + AFFINE),
  keep('GroupNormalization', STATS + NORMALISE + AFFINE, 18),
  keep('MeanVarianceNormalization', STATS + NORMALISE, 9),
];

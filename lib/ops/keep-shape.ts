// Ops whose output is the input's type and shape: CumSum (a running sum, one
// add per element), Trilu and ReverseSequence (masking and copying, no arithmetic).
import type { OpRule } from './rule.js';
import { like, numel } from './rule.js';

export const rules: OpRule[] = [
  { op: 'CumSum', since: 11, infer: (c) => [like(c, 0)], cost: (c) => ({ macs: 0n, ops: c.inputs[0] ? numel(c.inputs[0]) : 0n }) },
  { op: 'Trilu', since: 14, infer: (c) => [like(c, 0)] },
  { op: 'ReverseSequence', since: 10, infer: (c) => [like(c, 0)] },
];

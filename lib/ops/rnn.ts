// Recurrent layers (ONNX operator spec, RNN/GRU/LSTM). X is [seq, batch, input],
// or [batch, seq, input] with layout=1 (opset 14+). W is [dirs, gates·H, I] and
// R is [dirs, gates·H, H].
// MACs per time step, batch row and direction: gates·H·(I+H), the two gate matrix
// products. Ops per step, row and direction, per hidden unit (common practice,
// exp-like activations at 4 ops as in the elementwise rules):
//   RNN  add the two products 1 + tanh 4                                   = 5
//   GRU  add 3 + two sigmoids 8 + tanh 4 + reset product 1 + blend 3       = 19
//   LSTM add 4 + three sigmoids 12 + two tanh 8 + cell update 3 + output 1 = 28
// plus 2·gates with a bias input (Wb and Rb) and, for LSTM, 6 with peepholes
// (three multiply-adds). Activation overrides do not change these constants.
import type { Dim } from '../graph/ir.js';
import type { OpRule, InferCtx, Known, CostCtx, Cost } from './rule.js';
import { isNum, known, shapeOf } from './rule.js';

interface Cell { op: string; gates: number; opsPerUnit: number; outputs: number }
const CELLS: Cell[] = [
  { op: 'RNN', gates: 1, opsPerUnit: 5, outputs: 2 },
  { op: 'GRU', gates: 3, opsPerUnit: 19, outputs: 2 },
  { op: 'LSTM', gates: 4, opsPerUnit: 28, outputs: 3 },
];

function hidden(c: InferCtx | CostCtx, r: Dim[] | undefined, w: Dim[] | undefined, gates: number): Dim | undefined {
  const h = c.int('hidden_size');
  if (h !== undefined) return h;
  if (r && r.length === 3) return r[2];
  return w && w.length === 3 && isNum(w[1]) ? w[1] / gates : undefined;
}

const rule = (cell: Cell): OpRule => ({
  op: cell.op,
  infer: (c) => {
    const x = shapeOf(c, 0), w = shapeOf(c, 1), r = shapeOf(c, 2), dt = c.inputs[0]?.type.dtype;
    if (!x || x.length !== 3 || dt === undefined) return [];
    const batchFirst = c.int('layout', 0) === 1;
    const [seq, batch] = batchFirst ? [x[1], x[0]] : [x[0], x[1]];
    const dirs: Dim = c.str('direction', 'forward') === 'bidirectional' ? 2 : 1;
    const h = hidden(c, r, w, cell.gates);
    if (h === undefined) return [];
    const y: Dim[] = batchFirst ? [batch, seq, dirs, h] : [seq, dirs, batch, h];
    const state: Dim[] = batchFirst ? [batch, dirs, h] : [dirs, batch, h];
    return [y, state, state].slice(0, cell.outputs).map((s, i): Known | undefined => (c.node.outputs[i] ? known(dt, s) : undefined));
  },
  cost: (c): Cost => {
    const x = c.inputs[0]!, w = c.inputs[1]!;
    const steps = BigInt(x[0] * x[1] * (c.str('direction', 'forward') === 'bidirectional' ? 2 : 1));
    const h = BigInt(hidden(c, c.inputs[2], w, cell.gates) as number), i = BigInt(x[2]), g = BigInt(cell.gates);
    const perUnit = BigInt(cell.opsPerUnit) + (c.inputs[3] ? 2n * g : 0n) + (cell.op === 'LSTM' && c.inputs[7] ? 6n : 0n);
    return { macs: steps * g * h * (i + h), ops: steps * h * perUnit };
  },
});

export const rules: OpRule[] = CELLS.map(rule);

// Convolutions. Weights are [Cout, Cin/group, k...] (Conv) or [Cin, Cout/group, k...]
// (ConvTranspose), so in both cases a MAC count is "elements on the dense side ×
// ∏ weight dims after the first": every such element meets (C/group)·∏k taps.
import type { Dim } from '../graph/ir.js';
import type { CostCtx, InferCtx, Known, OpRule, Cost } from './rule.js';
import { isNum, known, numel, prod, shapeOf } from './rule.js';
import { spatialOut, windowOf } from './window.js';
import { INT32 } from '../onnx/dtype.js';

interface Slots { x: number; w: number; b: number }
const PLAIN: Slots = { x: 0, w: 1, b: 2 };
// QLinearConv: x, x_scale, x_zero_point, w, w_scale, w_zero_point, y_scale, y_zero_point, B
const QLINEAR: Slots = { x: 0, w: 3, b: 8 };

function checkChannels(op: string, cin: Dim, want: Dim): void {
  if (isNum(cin) && isNum(want) && cin !== want) throw new RangeError(`${op}: ${cin} input channels, weight expects ${want}`);
}

function convInfer(c: InferCtx, s: Slots, dtype: (c: InferCtx) => number | undefined): (Known | undefined)[] {
  const x = shapeOf(c, s.x), w = shapeOf(c, s.w);
  const dt = dtype(c);
  if (!x || !w || dt === undefined || x.length < 3 || w.length !== x.length) return [];
  checkChannels(c.node.op, x[1], isNum(w[1]) ? w[1] * c.int('group', 1) : w[1]);
  const win = windowOf(c, x.length - 2, w.slice(2));
  if (!win) return [];
  return [known(dt, [x[0], w[0], ...spatialOut(x.slice(2), win, false, () => c.fresh('conv'))])];
}

// Per output element: bias add (1 op); QLinearConv also rescales, rounds, adds the
// zero point and saturates (3 ops, common practice for integer requantisation).
// ConvInteger's zero-point offsets fold into the accumulation, so they cost nothing extra.
const convCost = (s: Slots, perOut: bigint) => (c: CostCtx): Cost => {
  const y = numel(c.outputs[0]);
  return { macs: y * prod(c.inputs[s.w]!.slice(1)), ops: y * (perOut + (c.inputs[s.b] ? 1n : 0n)) };
};

const conv: OpRule = { op: 'Conv', infer: (c) => convInfer(c, PLAIN, (c) => c.inputs[0]?.type.dtype), cost: convCost(PLAIN, 0n) };
const convInteger: OpRule = {
  op: 'ConvInteger',
  infer: (c) => convInfer(c, { ...PLAIN, b: -1 }, () => INT32),
  cost: convCost({ ...PLAIN, b: -1 }, 0n),
};
const qlinearConv: OpRule = {
  op: 'QLinearConv',
  // y's type is y_zero_point's (required by the spec), which always matches x's.
  infer: (c) => convInfer(c, QLINEAR, (c) => c.inputs[7]?.type.dtype ?? c.inputs[0]?.type.dtype),
  cost: convCost(QLINEAR, 3n),
};

const convTranspose: OpRule = {
  op: 'ConvTranspose',
  infer: (c) => {
    const x = shapeOf(c, 0), w = shapeOf(c, 1), dt = c.inputs[0]?.type.dtype;
    if (!x || !w || dt === undefined || x.length < 3 || w.length !== x.length) return [];
    checkChannels('ConvTranspose', x[1], w[0]);
    const n = x.length - 2;
    const win = windowOf(c, n, w.slice(2));
    if (!win) return [];
    const cout = isNum(w[1]) ? w[1] * c.int('group', 1) : c.fresh('convT_channels');
    const given = c.ints('output_shape');
    // output_shape lists spatial sizes; some exporters write N and C too: keep the last n.
    if (given?.length) return [known(dt, [x[0], cout, ...given.slice(-n)])];
    const outPad = c.ints('output_padding', new Array<number>(n).fill(0));
    const same = win.autoPad === 'SAME_UPPER' || win.autoPad === 'SAME_LOWER';
    const spatial = x.slice(2).map((d, i): Dim => {
      const s = win.strides[i];
      if (!isNum(d)) return same && s === 1 ? d : c.fresh('convT');
      if (same) return d * s;
      const span = win.dilations[i] * (win.kernel[i] - 1) + 1;
      const pads = win.autoPad === 'VALID' ? 0 : win.pads[i] + win.pads[i + n];
      return s * (d - 1) + outPad[i] + span - pads;
    });
    return [known(dt, [x[0], cout, ...spatial])];
  },
  // Each input element scatters into (Cout/group)·∏k outputs; bias once per output.
  cost: (c) => ({ macs: numel(c.inputs[0]!) * prod(c.inputs[1]!.slice(1)), ops: c.inputs[2] ? numel(c.outputs[0]) : 0n }),
};

export const rules: OpRule[] = [conv, convTranspose, convInteger, qlinearConv];

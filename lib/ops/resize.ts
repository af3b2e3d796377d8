// Resize and Upsample. Output dims are floor(dim * scale) in float32, or the
// `sizes` value (opset 11+; opset 18 adds `axes` and keep_aspect_ratio_policy).
// An empty scales/sizes input counts as absent. Nearest mode only copies;
// linear and cubic interpolate, which is arithmetic.
import type { Dim } from '../graph/ir.js';
import type { Cost, CostCtx, OpRule, InferCtx, Known } from './rule.js';
import { axis, isNum, known, numel } from './rule.js';
import { given, iota, isEmpty } from './fold-move.js';

const f32 = Math.fround;
const scaled = (c: InferCtx, d: Dim, s: number): Dim => (isNum(d) ? Math.floor(f32(f32(d) * s)) : s === 1 ? d : c.fresh('resize'));

function byScales(c: InferCtx, shape: Dim[], scales: number[] | undefined, axes: number[]): (Known | undefined)[] {
  const x = c.inputs[0]!;
  if (!scales) return [];
  if (scales.length !== axes.length) throw new RangeError(`${scales.length} scales for rank ${shape.length}`);
  const out = [...shape];
  axes.forEach((a, i) => { out[a] = scaled(c, shape[a], scales[i]); });
  return [known(x.type.dtype, out)];
}

function bySizes(c: InferCtx, shape: Dim[], sizes: number[], axes: number[]): (Known | undefined)[] {
  const x = c.inputs[0]!;
  if (sizes.length !== axes.length) throw new RangeError(`${sizes.length} sizes for ${axes.length} axes`);
  const policy = c.str('keep_aspect_ratio_policy', 'stretch');
  let sz: Dim[] = sizes;
  if (policy !== 'stretch') {
    const ds = axes.map((a) => shape[a]);
    if (!ds.every(isNum)) sz = axes.map(() => c.fresh('resize'));
    else {
      const rs = sizes.map((n, i) => f32(n / (ds[i] as number)));
      const k = policy === 'not_larger' ? Math.min(...rs) : Math.max(...rs);
      sz = ds.map((d) => Math.round(f32(k * (d as number))));
    }
  }
  const out = [...shape];
  axes.forEach((a, i) => { out[a] = sz[i]; });
  return [known(x.type.dtype, out)];
}

const resize = (since: number): OpRule => ({
  op: 'Resize',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    if (since < 11) return byScales(c, s, c.inputs[1]?.value?.data, iota(s.length));
    const axes = since >= 18 ? (c.ints('axes')?.map((a) => axis(a, s.length)) ?? iota(s.length)) : iota(s.length);
    const sizes = given(c, 3) && !isEmpty(c.inputs[3]) ? c.inputs[3] : undefined;
    if (sizes) return sizes.value ? bySizes(c, s, sizes.value.data, axes) : [];
    if (!given(c, 2)) return [];
    return byScales(c, s, c.inputs[2]?.value?.data, axes);
  },
  cost: interpCost,
});

// Upsample-1 has height/width scales for NCHW, 7 a scales attribute, 9 a scales input.
const upsample = (since: number): OpRule => ({
  op: 'Upsample',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    if (!x || !s) return [];
    if (since >= 9) return byScales(c, s, c.inputs[1]?.value?.data, iota(s.length));
    if (since >= 7) return byScales(c, s, c.floats('scales'), iota(s.length));
    return byScales(c, s, [1, 1, c.float('height_scale', 1), c.float('width_scale', 1)], iota(s.length));
  },
  cost: interpCost,
});

// Per output element: 2 taps per resized axis for (bi)linear, 4 for cubic, one weight MAC per tap.
function interpCost(c: CostCtx): Cost {
  const mode = c.str('mode', 'nearest');
  const x = c.inputs[0], y = c.outputs[0];
  if (mode === 'nearest' || !x || !y) return { macs: 0n, ops: 0n };
  const moved = y.filter((d, i) => d !== x[i]).length;
  const taps = BigInt((mode === 'cubic' ? 4 : 2) ** moved);
  return { macs: numel(y) * taps, ops: 0n };
}

export const rules: OpRule[] = [resize(10), resize(11), resize(18), upsample(1), upsample(7), upsample(9)];

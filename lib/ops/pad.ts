// Pad: each padded axis grows by begin + end (negative pads crop). Pads are an
// attribute before opset 11 ('paddings' in opset 1), an input after; opset 18
// adds an axes input naming the padded axes. The mode never changes the shape.
import type { OpRule } from './rule.js';
import { axis, known } from './rule.js';
import { dimAdd, given, iota, intsIn } from './fold-move.js';

const pad = (since: number): OpRule => ({
  op: 'Pad',
  since,
  infer: (c) => {
    const x = c.inputs[0], s = x?.type.shape;
    const pads = since >= 11 ? (given(c, 1) ? intsIn(c, 1) : undefined) : c.ints(since < 2 ? 'paddings' : 'pads');
    if (!x || !s || !pads) return [];
    const axes = since >= 18 && given(c, 3) ? intsIn(c, 3) : iota(s.length);
    if (!axes) return [];
    const k = axes.length;
    if (pads.length !== 2 * k) throw new RangeError(`Pad has ${pads.length} pads for ${k} axes`);
    const out = [...s];
    axes.forEach((a, i) => { const j = axis(a, s.length); out[j] = dimAdd(out[j], pads[i] + pads[i + k]); });
    return [known(x.type.dtype, out)];
  },
});

export const rules: OpRule[] = [pad(1), pad(2), pad(11), pad(18)];

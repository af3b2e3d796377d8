// Head kinds and layouts: what a head is, and which axes of a cut tensor it pools.
import type { Dim } from '../graph/ir.js';
import { OfframpError, usageError } from '../errors.js';

export type HeadKind =
  | { kind: 'linear' }
  /** one hidden fully connected layer of `hidden` units with Relu */
  | { kind: 'mlp'; hidden: number }
  /** 1×1 convolution to `channels` channels + Relu, before pooling */
  | { kind: 'conv'; channels: number }
  /** average pooling over a `cells` × `cells` grid of windows instead of globally (where things are, kept coarsely), then linear */
  | { kind: 'grid'; cells: number };

export type Layout = 'NCHW' | 'NHWC' | 'NCL' | 'NTD';
export const LAYOUTS: readonly Layout[] = ['NCHW', 'NHWC', 'NCL', 'NTD'];

export function parseHead(s: string): HeadKind {
  const m = /^(linear|mlp|conv|grid)(?::(\d+))?$/.exec(s.trim());
  if (!m) throw usageError(`--head takes linear, mlp:H, conv:C or grid:G, not '${s}'`);
  if (m[1] === 'linear') {
    if (m[2]) throw usageError(`--head linear takes no size ('${s}')`);
    return { kind: 'linear' };
  }
  const n = Number(m[2]);
  if (!m[2] || !(n > 0) || n > 65536) throw usageError(`--head ${m[1]} needs a size, e.g. ${m[1]}:32 ('${s}')`);
  return m[1] === 'mlp' ? { kind: 'mlp', hidden: n } : m[1] === 'conv' ? { kind: 'conv', channels: n } : { kind: 'grid', cells: n };
}

export const headName = (h: HeadKind): string => (h.kind === 'linear' ? 'linear' : h.kind === 'mlp' ? `mlp:${h.hidden}` : h.kind === 'conv' ? `conv:${h.channels}` : `grid:${h.cells}`);

export function parseLayout(s: string): Layout {
  const l = s.trim().toUpperCase() as Layout;
  if (!LAYOUTS.includes(l)) throw usageError(`--layout takes ${LAYOUTS.join(', ')}, not '${s}'`);
  return l;
}

/** Where the channels are and which axes pooling averages away. */
export interface Axes { layout: Layout | 'NC'; channel: number; pool: number[] }

/**
 * Rank 4 defaults to NCHW and rank 3 to NCL (what exporters of convolutional nets
 * emit); rank 2 is already a feature vector; rank ≥ 5 is channels-first, all
 * trailing axes spatial.
 */
export function axesFor(shape: readonly Dim[], layout: Layout | undefined, cut: string): Axes {
  const r = shape.length;
  if (r < 2) throw new OfframpError('shape', `cut tensor has rank ${r}; a head needs [batch, features, …]`, undefined, `cut '${cut}'`);
  if (r === 2) return { layout: 'NC', channel: 1, pool: [] };
  const l = layout ?? (r === 4 ? 'NCHW' : r === 3 ? 'NCL' : undefined);
  if (!l) return { layout: 'NCHW', channel: 1, pool: Array.from({ length: r - 2 }, (_, i) => i + 2) };
  const want = l.length;
  if (want !== r) throw new OfframpError('usage', `layout ${l} is for rank ${want}, the cut tensor has rank ${r}`, undefined, `cut '${cut}'`);
  switch (l) {
    case 'NCHW': return { layout: l, channel: 1, pool: [2, 3] };
    case 'NHWC': return { layout: l, channel: 3, pool: [1, 2] };
    case 'NCL': return { layout: l, channel: 1, pool: [2] };
    case 'NTD': return { layout: l, channel: 2, pool: [1] };
  }
}

// Peak activation memory over a node order. A value is live from its producer's
// step to its last consumer's step; graph inputs from the start, graph outputs to
// the end. Weights (initializers, Constant outputs) are not activations.

export interface LiveValue { name: string; bytes: bigint; birth: number; death: number }
export interface Peak { bytes: bigint; step: number; live: string[] }

/**
 * Live ranges, in steps of `order` (0..order.length-1). Inputs are born at -1 so
 * that they count at step 0; outputs die at order.length-1.
 */
export function liveRanges(
  order: number[],
  nodes: { inputs: string[]; outputs: string[]; reads: string[] }[],
  sizes: Map<string, bigint>,
  inputs: string[],
  outputs: string[],
): LiveValue[] {
  const birth = new Map<string, number>();
  const death = new Map<string, number>();
  for (const i of inputs) if (sizes.has(i)) { birth.set(i, -1); death.set(i, -1); }
  order.forEach((ni, step) => {
    for (const r of nodes[ni].reads) if (birth.has(r)) death.set(r, step);
    for (const o of nodes[ni].outputs) if (o && sizes.has(o)) { birth.set(o, step); death.set(o, step); }
  });
  const end = order.length - 1;
  for (const o of outputs) if (birth.has(o)) death.set(o, end);
  return [...birth].map(([name, b]) => ({ name, bytes: sizes.get(name)!, birth: b, death: death.get(name)! }));
}

/** Largest sum of live bytes at any step in [from, to]; a value counts at step s if birth ≤ s ≤ death. */
export function peakOver(ranges: LiveValue[], from: number, to: number): Peak {
  const n = to - from + 1;
  if (n <= 0) return { bytes: 0n, step: from, live: [] };
  const delta: bigint[] = new Array(n + 1).fill(0n);
  for (const v of ranges) {
    const a = Math.max(v.birth, from), b = Math.min(v.death, to);
    if (a > b) continue;
    delta[a - from] += v.bytes;
    delta[b - from + 1] -= v.bytes;
  }
  let cur = 0n, best = -1n, at = from;
  for (let s = 0; s < n; s++) { cur += delta[s]; if (cur > best) { best = cur; at = s + from; } }
  const live = ranges.filter((v) => v.birth <= at && at <= v.death).map((v) => v.name);
  return { bytes: best < 0n ? 0n : best, step: at, live };
}

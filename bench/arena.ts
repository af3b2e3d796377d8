// Arena planning time: planArena over every activation of EfficientNet-B0 (240 values
// in file order) and of its third quarter by MACs (where greedy alone
// fragments and the squeaky-wheel rounds run). Prints one JSON line; bench/run.ts prints it
// with the target.
import { efficientnetB0 } from '../test/helpers/nets.js';
import { costModel } from '../lib/cost/report.js';
import { liveRanges } from '../lib/cost/memory.js';
import { planArena } from '../lib/cost/arena.js';
import { readsOf } from '../lib/graph/links.js';

const m = efficientnetB0({ weights: 'zeros', bn: false });
const r = costModel(m);
const sizes = new Map<string, bigint>();
for (const t of r.model.inputs) sizes.set(t.name, t.bytes);
for (const n of r.nodes) for (const o of n.outputs) sizes.set(o.name, o.bytes);
const order = r.nodes.map((n) => n.index);
const io = m.graph.nodes.map((n) => ({ inputs: n.inputs, outputs: n.outputs, reads: readsOf(n) }));
const ranges = liveRanges(order, io, sizes, r.model.inputs.map((t) => t.name), r.model.outputs.map((t) => t.name));
let sum = 0n, from = 0, to = order.length - 1;
r.nodes.forEach((n, step) => { sum += n.macs; if (!from && sum * 2n >= r.model.macs) from = step + 1; if (to === order.length - 1 && sum * 4n >= 3n * r.model.macs) to = step; });

const time = (f: () => unknown) => {
  for (let i = 0; i < 3; i++) f();
  const t0 = performance.now();
  let n = 0;
  while (performance.now() - t0 < 500) { f(); n++; }
  return (performance.now() - t0) / n;
};
const whole = planArena(ranges), part = planArena(ranges, { from, to });
process.stdout.write(JSON.stringify({
  values: ranges.length, wholeMs: time(() => planArena(ranges)), wholeMethod: whole.method,
  partValues: part.slots.length, partMs: time(() => planArena(ranges, { from, to })), partMethod: part.method,
}));

// Graph passes: plain functions that take a graph and return a new one, leaving
// their input untouched.
import type { Graph } from './ir.js';
import { readsOf } from './links.js';

/**
 * Dead-code removal: keep only the nodes whose outputs a graph output needs
 * (through explicit inputs and body captures), and the initializers and
 * value_info they still use. Graph inputs stay: they are the model's interface.
 */
export function eliminateDeadCode(g: Graph): Graph {
  const needed = new Set(g.outputs.map((o) => o.name));
  const keep = new Array<boolean>(g.nodes.length).fill(false);
  // Walking backwards over a topologically ordered file finds every producer after its consumers.
  let changed = true;
  while (changed) {
    changed = false;
    for (let i = g.nodes.length - 1; i >= 0; i--) {
      if (keep[i] || !g.nodes[i].outputs.some((o) => o && needed.has(o))) continue;
      keep[i] = changed = true;
      for (const r of readsOf(g.nodes[i])) needed.add(r);
    }
  }
  const nodes = g.nodes.filter((_, i) => keep[i]);
  const live = new Set([...needed, ...g.inputs.map((v) => v.name)]);
  return {
    ...g,
    nodes,
    initializers: new Map([...g.initializers].filter(([n]) => live.has(n))),
    valueInfo: new Map([...g.valueInfo].filter(([n]) => live.has(n))),
  };
}

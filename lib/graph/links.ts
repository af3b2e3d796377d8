// Producer/consumer links and topological order, derived from a Graph on demand.
import type { Graph, Node } from './ir.js';
import { graphError } from '../errors.js';

export interface Links {
  /** value name → index of the node producing it */
  producer: Map<string, number>;
  /** value name → indices of nodes reading it (explicitly or from a body) */
  consumers: Map<string, number[]>;
}

/** All names a node reads: explicit inputs plus outer-scope names its bodies capture. */
export const readsOf = (n: Node): string[] => [...n.inputs.filter(Boolean), ...n.captures];

export function linkGraph(g: Graph): Links {
  const producer = new Map<string, number>();
  const consumers = new Map<string, number[]>();
  const sources = new Set([...g.inputs.map((v) => v.name), ...g.initializers.keys()]);
  g.nodes.forEach((n, i) => {
    for (const o of n.outputs) {
      if (!o) continue;
      if (producer.has(o)) throw graphError(`value '${o}' has two producers (nodes ${describe(g, producer.get(o)!)} and ${describe(g, i)})`);
      if (sources.has(o)) throw graphError(`value '${o}' is a graph input or initializer and also produced by node ${describe(g, i)}`);
      producer.set(o, i);
    }
    for (const r of new Set(readsOf(n))) {
      let c = consumers.get(r);
      if (!c) consumers.set(r, (c = []));
      c.push(i);
    }
  });
  return { producer, consumers };
}

export const describe = (g: Graph, i: number): string => `#${i} ${g.nodes[i].op}${g.nodes[i].name ? ` '${g.nodes[i].name}'` : ''}`;

/**
 * Stable topological order (Kahn, ties broken by file order). A value nobody
 * produces, or a cycle, is an error naming the value.
 * `outer` names the values visible from enclosing graphs (for bodies).
 */
export function topoOrder(g: Graph, links = linkGraph(g), outer: ReadonlySet<string> = new Set()): number[] {
  const avail = new Set<string>([...g.inputs.map((v) => v.name), ...g.initializers.keys(), ...outer]);
  const pending = g.nodes.map(() => 0);
  g.nodes.forEach((n, i) => {
    for (const r of new Set(readsOf(n))) {
      if (avail.has(r)) continue;
      if (!links.producer.has(r)) throw graphError(`node ${describe(g, i)} reads '${r}', which no node, input or initializer provides`);
      pending[i]++;
    }
  });
  // A min-heap over node indices keeps the file order wherever it is already valid.
  const ready: number[] = [];
  const push = (x: number) => { ready.push(x); let i = ready.length - 1; while (i > 0) { const p = (i - 1) >> 1; if (ready[p] <= ready[i]) break; [ready[p], ready[i]] = [ready[i], ready[p]]; i = p; } };
  const pop = () => { const top = ready[0], last = ready.pop()!; if (ready.length) { ready[0] = last; let i = 0; for (;;) { const l = 2 * i + 1, r = l + 1; let m = i; if (l < ready.length && ready[l] < ready[m]) m = l; if (r < ready.length && ready[r] < ready[m]) m = r; if (m === i) break; [ready[m], ready[i]] = [ready[i], ready[m]]; i = m; } } return top; };
  pending.forEach((p, i) => p === 0 && push(i));
  const order: number[] = [];
  while (ready.length) {
    const i = pop();
    order.push(i);
    for (const o of g.nodes[i].outputs) {
      if (!o) continue;
      for (const c of new Set(links.consumers.get(o) ?? [])) {
        const times = readsOf(g.nodes[c]).includes(o) ? 1 : 0;
        if (times && --pending[c] === 0) push(c);
      }
    }
  }
  if (order.length < g.nodes.length) {
    const stuck = g.nodes.findIndex((_, i) => pending[i] > 0);
    const n = g.nodes[stuck];
    const waiting = readsOf(n).find((r) => !avail.has(r) && !order.some((j) => g.nodes[j].outputs.includes(r)));
    throw graphError(`cycle: node ${describe(g, stuck)} waits on '${waiting}', which depends on its own output`);
  }
  return order;
}

/** True if the file order is already a valid execution order. */
export function isTopological(g: Graph): boolean {
  const order = topoOrder(g);
  return order.every((x, i) => x === i);
}

/** A value named by the user: a node output, or a node's name standing for its first output. */
export function findProduced(g: Graph, spec: string): { name: string; node: number } | undefined {
  let node = g.nodes.findIndex((n) => n.outputs.includes(spec));
  if (node >= 0) return { name: spec, node };
  node = g.nodes.findIndex((n) => n.name === spec);
  return node >= 0 ? { name: g.nodes[node].outputs[0], node } : undefined;
}

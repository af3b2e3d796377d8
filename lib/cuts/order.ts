// Node orders to cut along. Only nodes some graph output needs take part, and
// weights (initializers, Constant outputs) are not steps: every stage that reads a
// weight gets its own copy, so a weight never has to cross a boundary.
import type { Graph, Node } from '../graph/ir.js';
import { linkGraph, readsOf, topoOrder, type Links } from '../graph/links.js';

export type OrderKind = 'file' | 'block';

export const isConstantNode = (n: Node) => n.op === 'Constant' && n.domain === '' && n.inputs.length === 0;

/** Weight names: initializers and Constant outputs. */
export function weightNames(g: Graph): Set<string> {
  const w = new Set(g.initializers.keys());
  for (const n of g.nodes) if (isConstantNode(n)) for (const o of n.outputs) w.add(o);
  return w;
}

/** Nodes (not Constants) that the given outputs depend on, explicit reads and captures alike. */
export function neededNodes(g: Graph, outputs: string[], links: Links = linkGraph(g)): Set<number> {
  const need = new Set<number>();
  const stack = outputs.map((o) => links.producer.get(o)).filter((i): i is number => i !== undefined);
  while (stack.length) {
    const i = stack.pop()!;
    if (need.has(i)) continue;
    need.add(i);
    for (const r of readsOf(g.nodes[i])) { const p = links.producer.get(r); if (p !== undefined && !need.has(p)) stack.push(p); }
  }
  for (const i of [...need]) if (isConstantNode(g.nodes[i])) need.delete(i);
  return need;
}

/** The file's own order (made topological where it is not), restricted to needed nodes. */
export function fileOrder(g: Graph, need: Set<number>, links: Links = linkGraph(g)): number[] {
  return topoOrder(g, links).filter((i) => need.has(i));
}

/**
 * Block-keeping order: depth-first from the outputs, each node right after the
 * producers of what it reads, in read order. A branch is finished before the next
 * starts, and values made from weights alone are computed just before their use
 * instead of wherever the file put them.
 */
export function blockOrder(g: Graph, need: Set<number>, roots: string[], links: Links = linkGraph(g)): number[] {
  const order: number[] = [];
  const done = new Set<number>();
  const visit = (start: number) => {
    const stack: { i: number; k: number; reads: string[] }[] = [{ i: start, k: 0, reads: readsOf(g.nodes[start]) }];
    done.add(start);
    while (stack.length) {
      const top = stack[stack.length - 1];
      if (top.k < top.reads.length) {
        const p = links.producer.get(top.reads[top.k++]);
        if (p !== undefined && need.has(p) && !done.has(p)) { done.add(p); stack.push({ i: p, k: 0, reads: readsOf(g.nodes[p]) }); }
      } else { stack.pop(); order.push(top.i); }
    }
  };
  for (const o of roots) { const p = links.producer.get(o); if (p !== undefined && need.has(p) && !done.has(p)) visit(p); }
  for (const i of [...need].sort((a, b) => a - b)) if (!done.has(i)) visit(i);
  return order;
}

/**
 * Side branches (nodes no main output needs, e.g. exit heads) move to the earliest
 * step their reads allow, so the tensor they branch from is not held across later
 * boundaries just for them.
 */
export function hoistSide(g: Graph, order: number[], main: Set<number>, links: Links = linkGraph(g)): number[] {
  const side = order.filter((i) => !main.has(i));
  if (!side.length) return order;
  const inOrder = new Set(order);
  const placed = new Set<number>();
  const out: number[] = [];
  const ready = (i: number) => readsOf(g.nodes[i]).every((r) => { const p = links.producer.get(r); return p === undefined || placed.has(p) || !inOrder.has(p); });
  const flush = () => {
    for (let moved = true; moved;) {
      moved = false;
      for (const s of side) if (!placed.has(s) && ready(s)) { placed.add(s); out.push(s); moved = true; }
    }
  };
  flush();
  for (const i of order) {
    if (!main.has(i)) continue;
    placed.add(i); out.push(i);
    flush();
  }
  return out;
}

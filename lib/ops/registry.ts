// Rules by (domain, op), each list sorted by `since`; lookup takes the newest
// rule whose `since` is at most the model's opset for that domain.
import type { OpRule } from './rule.js';

const table = new Map<string, OpRule[]>();
const key = (domain: string, op: string) => `${domain}::${op}`;

export function register(rules: OpRule[]): void {
  for (const r of rules) {
    const k = key(r.domain ?? '', r.op);
    const list = table.get(k) ?? [];
    if (list.some((x) => (x.since ?? 1) === (r.since ?? 1))) throw new Error(`duplicate rule for ${k} since ${r.since ?? 1}`);
    list.push(r);
    list.sort((a, b) => (a.since ?? 1) - (b.since ?? 1));
    table.set(k, list);
  }
}

export function findRule(domain: string, op: string, opset: number): OpRule | undefined {
  const list = table.get(key(domain, op));
  if (!list) return undefined;
  let found: OpRule | undefined;
  for (const r of list) if ((r.since ?? 1) <= opset) found = r;
  return found ?? list[0];
}

export const registeredOps = (): string[] => [...table.keys()];

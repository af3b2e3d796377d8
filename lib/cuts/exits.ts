// Exit heads: extra graph outputs exit-0, exit-1 … described by the model's
// metadata_props key "offramp.exits" (JSON). Only the output names matter here;
// the rest of the description belongs to the head fitting step.
import type { Model } from '../graph/ir.js';

export const EXITS_KEY = 'offramp.exits';
const EXIT_NAME = /^exit-\d+$/;

/** Names of graph outputs that are exits: named in the metadata, or named exit-N. */
export function exitOutputs(model: Model): string[] {
  const outs = model.graph.outputs.map((o) => o.name);
  const named = new Set(outs.filter((o) => EXIT_NAME.test(o)));
  const raw = model.proto.metadataProps?.find((p) => p.key === EXITS_KEY)?.value;
  if (raw) {
    try {
      const j = JSON.parse(raw) as unknown;
      // Accept a list of { output | name } records or an object keyed by output name: the head issue owns the exact form.
      const list = Array.isArray(j) ? j : j && typeof j === 'object' ? Object.entries(j as object).map(([k, v]) => ({ output: k, ...(v as object) })) : [];
      for (const e of list as { output?: unknown; name?: unknown }[]) {
        const n = typeof e?.output === 'string' ? e.output : typeof e?.name === 'string' ? e.name : undefined;
        if (n && outs.includes(n)) named.add(n);
      }
    } catch { /* unreadable metadata: the names alone decide */ }
  }
  return outs.filter((o) => named.has(o));
}

/** The cut value each exit reads, in exit order, from the "offramp.exits" metadata ([] if none). */
export function exitCuts(model: Model): string[] {
  const raw = model.proto.metadataProps?.find((p) => p.key === EXITS_KEY)?.value;
  if (!raw) return [];
  try {
    const j = JSON.parse(raw) as { exit?: number; cut?: unknown }[];
    if (!Array.isArray(j)) return [];
    return j.filter((e) => typeof e?.cut === 'string').sort((a, b) => (a.exit ?? 0) - (b.exit ?? 0)).map((e) => e.cut as string);
  } catch { return []; }
}

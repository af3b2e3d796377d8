// The cost report for people (text, Markdown) and for scripts (JSON, schema offramp-cost/1).
import { FINAL } from './words.js';
import type { CostReport } from '../cost/report.js';
import { si, bytes, table, mdTable, toJson } from './units.js';
import { ARENA_ALIGN } from '../cost/arena.js';

export const COST_SCHEMA = 'offramp-cost/1';

/** `extra` adds sections after the report's own fields (budget, reorder). */
export function costJson(r: CostReport, extra: Record<string, unknown> = {}): string {
  return toJson({ schema: COST_SCHEMA, ...r, ...extra }) + '\n';
}

const shape = (s: number[]) => `[${s.join('×')}]`;

function nodeRows(r: CostReport): string[][] {
  return r.nodes.map((n) => [
    String(n.index), n.name || '-', n.op, n.outputs.map((o) => shape(o.shape) + (o.source === 'measured' ? '*' : '')).join(' '),
    n.macs ? si(n.macs) : '-', n.params ? si(n.params) : '-', n.outputs.length ? bytes(n.outputs.reduce((s, o) => s + o.bytes, 0n)) : '-',
  ]);
}
const NODE_HEAD = ['#', 'node', 'op', 'output', 'MACs', 'params', 'out bytes'];
const STAGE_HEAD = ['stage', 'nodes', 'ends at', 'MACs', 'share', 'weights', 'peak act.', 'arena', 'in', 'out'];
function stageRows(r: CostReport): string[][] {
  return r.stages.map((s) => [
    String(s.index), `${s.first}–${s.last}`, s.cut || FINAL, si(s.macs), `${(s.macFraction * 100).toFixed(1)}%`,
    bytes(s.paramBytes), bytes(s.peakActivationBytes), bytes(s.arenaBytes),
    bytes(s.inputs.reduce((a, x) => a + x.bytes, 0n)), bytes(s.outputs.reduce((a, x) => a + x.bytes, 0n)),
  ]);
}

/** How far a plan sits above the live-set bound: "+1.25% over" (hundredths, truncated, from exact integers), or "equal to". */
export function overPeak(arena: bigint, peak: bigint): string {
  if (arena === peak || !peak) return arena === peak ? 'equal to' : 'over';
  return `+${(Number(((arena - peak) * 10000n) / peak) / 100).toFixed(2)}% over`;
}

function summary(r: CostReport): string[] {
  const m = r.model;
  const lines = [
    `model      ${m.file ?? '(in memory)'}${m.producer ? `  (from ${m.producer})` : ''}`,
    `opsets     ${Object.entries(m.opsets).map(([d, v]) => `${d || 'ai.onnx'} ${v}`).join(', ')}; IR ${m.irVersion}`,
    `MACs       ${si(m.macs)} (${m.macs})${m.int8Macs ? `, ${si(m.int8Macs)} of them int8 (QDQ)` : ''}   other ops ${si(m.ops)}`,
    `weights    ${si(m.params)} params, ${bytes(m.paramBytes)}${Object.keys(m.paramBytesByType).length > 1 ? ` (${Object.entries(m.paramBytesByType).map(([k, v]) => `${k} ${bytes(v)}`).join(', ')})` : ''}`,
    `peak act.  ${bytes(m.peakActivationBytes)} (${m.peakActivationBytes} B) at ${m.peakAt}`,
    `arena      ${bytes(m.arenaBytes)} (${m.arenaBytes} B) with ${ARENA_ALIGN}-byte offsets, ${overPeak(m.arenaBytes, m.peakActivationBytes)} the peak`,
  ];
  if (r.shapes.measured.length) lines.push(`measured   ${r.shapes.measured.length} value shape(s) measured with onnxruntime (marked *)`);
  for (const w of r.warnings) lines.push(`warning    ${w}`);
  return lines;
}

/** The cost report as the CLI prints it: summary, node table (unless `nodes: false`), stage table. */
export function costText(r: CostReport, opts: { nodes?: boolean } = {}): string {
  const parts = [summary(r).join('\n')];
  if (opts.nodes !== false) parts.push(table(NODE_HEAD, nodeRows(r)));
  if (r.stages.length > 1) parts.push(table(STAGE_HEAD, stageRows(r)));
  return parts.join('\n\n') + '\n';
}

export function costMarkdown(r: CostReport, opts: { nodes?: boolean } = {}): string {
  const parts = ['## Cost', summary(r).map((l) => `- ${l.replace(/^(\S+(?: act\.)?)\s+/, '**$1** ')}`).join('\n')];
  if (r.stages.length > 1) parts.push('### Stages', mdTable(STAGE_HEAD, stageRows(r)));
  if (opts.nodes !== false) parts.push('### Nodes', mdTable(NODE_HEAD, nodeRows(r)));
  return parts.join('\n\n') + '\n';
}

// Budgets and the memory-aware order for people (text, Markdown); JSON takes the
// objects as they are (fields "budget" and "reorder" of the cost report).
import type { CostReport } from '../cost/report.js';
import type { MemoryOrder } from '../cost/reorder.js';
import type { Budget, Fit, LatencyBasis, Over, Precision, StageCheck } from '../chip/budget.js';
import { bytes, mdTable, scaled, si, table } from './units.js';
import { FINAL } from './words.js';

/** What the stored figures are: "float32" when every weight is, else "as stored". */
export function storedLabel(r: CostReport): string {
  const types = Object.keys(r.model.paramBytesByType);
  return types.length === 1 && types[0] === 'float32' ? 'float32' : 'as stored';
}

/** 1234567n ns → "1.23 ms"; from 1000 s on, whole seconds in full. */
export function duration(ns: bigint): string {
  const x = Number(ns);
  if (x < 1e3) return `${x} ns`;
  return scaled(x, [[1e3, 'µs'], [1e6, 'ms'], [1e9, 's']], (y) => y.toPrecision(3)) ?? `${(ns + 500_000_000n) / 1_000_000_000n} s`;
}

const pct = (p: number) => `${p >= 0 ? '+' : ''}${p.toFixed(2)}%`;
const margin = (f: Fit) => `${f.margin >= 0n ? '+' : ''}${bytes(f.margin)} (${pct(f.marginPercent)})`;
const verdict = (c: { flash: Fit; ram: Fit }) => {
  const over = [!c.flash.fits && 'flash', !c.ram.fits && 'RAM'].filter(Boolean);
  return over.length ? `OVER ${over.join('+')}` : 'fits';
};

const HEAD = ['stage', 'ends at', 'as', 'MACs', 'weights', 'flash margin', 'peak act.', 'arena', 'handover', 'RAM need', 'RAM margin', 'latency', 'to exit', 'latency is', 'verdict'];
/** The basis of a latency in a table cell: the long form goes under the table (basisLines). */
export const basisWord = (b: LatencyBasis) => (b === 'projected from the measured rate' ? 'projected' : b);
/** The int8 projection of files already int8 (QDQ as stored) is the stored figures again: one row, not two. */
const sameCheck = (a: StageCheck | { flash: Fit; ram: Fit }, c: StageCheck | { flash: Fit; ram: Fit }) =>
  a.flash.need === c.flash.need && a.ram.need === c.ram.need && ('latencyNs' in a && 'latencyNs' in c ? a.latencyNs === c.latencyNs : true);
export const projectionShown = (b: Budget) =>
  b.gate === 'int8' || b.stages.some((s) => !sameCheck(s.stored, s.int8)) || !sameCheck(b.all.stored, b.all.int8);

function rows(b: Budget, label: string): string[][] {
  const both = projectionShown(b);
  const precisions = both ? (['stored', 'int8'] as const) : (['stored'] as const);
  const name = (p: Precision) => (p === 'stored' ? label : 'int8') + (both && p === b.gate ? ' *' : '');
  const out: string[][] = [];
  for (const s of b.stages) for (const p of precisions) {
    const c: StageCheck = s[p];
    const firstRow = p === 'stored';
    out.push([
      firstRow ? String(s.index) : '', firstRow ? s.cut || FINAL : '', name(p), firstRow ? si(s.macs) : '',
      bytes(c.weightBytes), margin(c.flash), bytes(c.peakBytes), bytes(c.arenaBytes), bytes(c.handoverBytes), bytes(c.ram.need), margin(c.ram),
      duration(c.latencyNs), duration(c.cumulativeNs), basisWord(c.latencyBasis), verdict(c),
    ]);
  }
  if (b.stages.length > 1) for (const p of precisions) {
    const a = b.all[p];
    out.push([p === 'stored' ? 'all' : '', '', name(p), '', bytes(a.flash.need), margin(a.flash), '', '', '', bytes(a.ram.need), margin(a.ram),
      duration(b.stages[b.stages.length - 1][p].cumulativeNs), '', basisWord(b.stages[b.stages.length - 1][p].latencyBasis), verdict(a)]);
  }
  return out;
}

const rate = (x: number) => `${x} MAC/cycle`;
function targetLine(b: Budget): string {
  const t = b.target;
  return `${t.name}: flash ${bytes(t.flashBytes)}, RAM ${bytes(t.ramBytes)}, ${t.clockMhz} MHz, ${rate(t.macsPerCycle)}`
    + (t.int8MacsPerCycle !== t.macsPerCycle ? ` (int8 ${rate(t.int8MacsPerCycle)})` : '')
    + (!t.rough ? '' : t.rateBasis.float === 'measured' || t.rateBasis.int8 === 'measured'
      ? ` — MAC rates ${t.rateBasis.float === t.rateBasis.int8 ? '' : `(${t.rateBasis.float === 'measured' ? 'float32' : 'int8'}) `}measured on the emulated core, cycles per instruction estimated; flash, RAM and clock ROUGH FIGURES, FROM MEMORY: give your part's own`
      : ' — ROUGH FIGURES, FROM MEMORY: give your part\'s own');
}

/** What the latencies are, in words, one line per basis the table shows. */
export function basisLines(b: Budget): string[] {
  const seen = new Set(b.stages.flatMap((s) => [s.stored.latencyBasis, s.int8.latencyBasis]));
  const out: string[] = [];
  if (seen.has('projected from the measured rate')) out.push('projected: MACs / the MAC rate measured on the emulated core (instructions exact, cycles at an estimated cycles per instruction), not this model run');
  if (seen.has('from memory')) out.push('from memory: MACs / a MAC rate nobody measured here (a from-memory profile figure, or one given in an option or profile file)');
  if (seen.has('measured')) out.push('measured: this firmware\'s instructions counted on the emulated core, cycles at an estimated cycles per instruction');
  return out;
}

/** Exact bytes beside the rounded figure, for the lines a CI log shows. */
const exactly = (v: bigint) => (v >= 1024n || v <= -1024n ? `${bytes(v)} (${v} B)` : bytes(v));

export function overLine(o: Over, label: string): string {
  const where = o.stage === 'all' ? 'all stages together' : `stage ${o.stage}${o.cut ? ` (ends at '${o.cut}')` : ''}`;
  return `${where}: ${o.resource === "ram" ? "RAM" : "flash"} needs ${exactly(o.need)} of ${exactly(o.limit)} (${o.precision === 'stored' ? label : 'int8'}), over by ${exactly(-o.margin)} (${(-o.marginPercent).toFixed(2)}%)`;
}

function verdictLines(b: Budget, label: string): string[] {
  const gate = b.gate === 'stored' ? label : 'int8';
  const marked = projectionShown(b) ? ', marked *' : '';
  if (b.fits) return [`verdict    every stage fits (judged on ${gate}${marked})`];
  return [`verdict    OVER BUDGET (judged on ${gate}${marked})`, ...b.over.map((o) => `  over     ${overLine(o, label)}`)];
}

/** The budget for people; how each figure is counted (the conventions) only with `verbose`. */
export function budgetText(b: Budget, label = 'as stored', o: { verbose?: boolean } = {}): string {
  return [
    `target     ${targetLine(b)}`,
    table(HEAD, rows(b, label)) + '\n' + basisLines(b).map((l, i) => `${i ? '          ' : 'latency   '} ${l}`).join('\n'),
    verdictLines(b, label).join('\n'),
    o.verbose ? b.conventions.map((c, i) => `${i ? '          ' : 'figures   '} ${c}`).join('\n') : 'figures    how each is counted: --verbose',
  ].join('\n\n') + '\n';
}

/** Markdown is a report to keep: the conventions always go with it. */
export function budgetMarkdown(b: Budget, label = 'as stored'): string {
  return [
    '### Budget', `- **target** ${targetLine(b)}`, mdTable(HEAD, rows(b, label)), basisLines(b).map((l) => `- **latency** ${l}`).join('\n'),
    verdictLines(b, label).map((l) => `- ${l.trim().replace(/^(verdict|over)\s+/, '**$1** ')}`).join('\n'),
    b.conventions.map((c) => `- ${c}`).join('\n'),
  ].join('\n\n') + '\n';
}

const change = (a: bigint, b: bigint) => (a ? `${(Number(((b - a) * 10000n) / a) / 100).toFixed(2)}%` : '-');
const ORDER_HEAD = ['stage', 'steps', 'peak before', 'peak after', 'change', 'method', 'moved'];
const orderRows = (o: MemoryOrder) => o.stages.map((s) => [String(s.index), `${s.first}–${s.last}`, bytes(s.before), bytes(s.after), change(s.before, s.after), s.method, String(s.moved)]);
const orderLine = (o: MemoryOrder) => `peak activation ${bytes(o.before)} → ${bytes(o.after)} (${change(o.before, o.after)}) by reordering nodes within stages`;

export function reorderText(o: MemoryOrder): string {
  return `reorder    ${orderLine(o)}\n\n${table(ORDER_HEAD, orderRows(o))}\n`;
}
export function reorderMarkdown(o: MemoryOrder): string {
  return `### Memory-aware order\n\n- ${orderLine(o)}\n\n${mdTable(ORDER_HEAD, orderRows(o))}\n`;
}

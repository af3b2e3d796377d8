// `offramp scan MODEL`: candidate cut points, ranked.
import type { Command } from 'commander';
import { loadModel } from '../graph/io.js';
import { rankCuts, scanModel, type Cut, type CutPlan } from '../cuts/scan.js';
import { bytes, si, table, toJson } from '../report/units.js';
import { collect, emit, parseBatch, parseDims, parseNumber, modelAction } from './common.js';
import { modelReads, refuseInputsAsOutputs } from './guard.js';

export const SCAN_SCHEMA = 'offramp-scan/1';

const shape = (s: (number | string)[]) => `[${s.join('×')}]`;
const tensors = (c: Cut) => c.tensors.map((t) => `${t.name} ${t.dtype}${shape(t.shape)}`).join(' + ');

export function scanText(plan: CutPlan, ranked: { cut: Cut; score: number }[]): string {
  const m = plan.model;
  const lines = [
    `model      ${m.file ?? '(in memory)'}: ${plan.steps.length} nodes, ${si(plan.totalMacs)} MACs`,
    `order      ${plan.order === 'block' ? 'block-keeping (depth-first from the outputs)' : "the file's own"}: clean cuts file ${plan.cleanBy.file}, block-keeping ${plan.cleanBy.block}`,
    `cuts       ${plan.candidates.length} candidates, ${plan.candidates.filter((c) => c.clean).length} clean (one crossing tensor)`,
    ...(plan.exits.length ? [`exits      ${plan.exits.join(', ')}`] : []),
    ...plan.warnings.map((w) => `warning    ${w}`),
  ];
  if (!ranked.length) return lines.join('\n') + '\n';
  const rows = ranked.map((r, i) => [
    String(i + 1), `${(r.cut.macFraction * 100).toFixed(1)}%`, `${r.cut.after.name || `#${r.cut.after.index}`} (${r.cut.after.op})`,
    r.cut.clean ? 'clean' : `${r.cut.tensors.length} tensors`, tensors(r.cut), bytes(r.cut.handoverBytes),
  ]);
  return `${lines.join('\n')}\n\n${table(['rank', 'MACs before', 'after node', 'kind', 'crossing', 'handover'], rows)}\n` +
    `\nsplit with: --cuts ${suggested(ranked).map((c) => c.tensors.map((t) => t.name).join('+')).join(',')}\n`;
}

/** Up to three of the best cuts that each leave work on both sides, at distinct MAC shares, in graph order. */
function suggested(ranked: { cut: Cut }[]): Cut[] {
  const out: Cut[] = [];
  for (const { cut } of ranked) {
    if (out.length === 3) break;
    if (cut.macFraction <= 0.005 || cut.macFraction >= 0.995 || out.some((c) => Math.abs(c.macFraction - cut.macFraction) < 1e-9)) continue;
    out.push(cut);
  }
  return out.sort((a, b) => a.step - b.step);
}

export function scanJson(plan: CutPlan, ranked: { cut: Cut; score: number }[]): string {
  return toJson({
    schema: SCAN_SCHEMA, model: plan.model.file ?? null, order: plan.order, cleanBy: plan.cleanBy,
    nodes: plan.steps.length, macs: plan.totalMacs, exits: plan.exits, warnings: plan.warnings,
    candidates: ranked.map((r, i) => ({ rank: i + 1, score: Number(r.score.toFixed(6)), cut: r.cut.tensors.map((t) => t.name).join('+'), ...r.cut })),
  }) + '\n';
}

export function scanCommand(program: Command): void {
  program.command('scan')
    .description('find cut points: boundaries where one (clean) to three tensors cross')
    .argument('<model>', 'ONNX model file')
    .option('--top <n>', 'show the best N, spread evenly over the MACs')
    .option('--json', 'machine-readable (schema offramp-scan/1)')
    .option('--dim <name=value>', 'bind a symbolic dim (repeatable)', collect, [])
    .option('--batch <n>', 'batch size for a symbolic leading input dim', '1')
    .option('-o, --out <file>', 'write to a file instead of stdout')
    .action(modelAction(async (file: string, o: { top?: string; json?: boolean; dim: string[]; batch: string; out?: string }) => {
      // Ranking spreads N shares over the MACs: past a thousand rows a table says nothing more.
      const top = o.top === undefined ? undefined : parseNumber(o.top, '--top', { int: true, min: 1, max: 1000 });
      const opts = { dims: parseDims(o.dim), batch: parseBatch(o.batch) };
      const model = loadModel(file);
      refuseInputsAsOutputs(modelReads(model, file), [o.out]);
      const plan = await scanModel(model, opts);
      const ranked = rankCuts(plan.candidates, top ?? Math.min(3, plan.candidates.length));
      const shown = top ? ranked.slice(0, top) : ranked;
      emit(o.json ? scanJson(plan, shown) : scanText(plan, shown), o.out);
    }));
}

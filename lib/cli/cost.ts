// `offramp cost MODEL`: per-node and per-stage MACs, weights and activation memory.
import type { Command } from 'commander';
import { loadModel } from '../graph/io.js';
import { analyzeModel } from '../cost/analyze.js';
import { costJson, costMarkdown, costText } from '../report/cost.js';
import { collect, emit, parseDims, splitList } from './common.js';

export function costCommand(program: Command): void {
  program.command('cost')
    .description('count MACs, weights and peak activation memory, per node and per stage')
    .argument('<model>', 'ONNX model file')
    .option('--cuts <values>', 'stage boundaries: comma-separated value (or node) names')
    .option('--dim <name=value>', 'bind a symbolic dim (repeatable)', collect, [])
    .option('--batch <n>', 'batch size for a symbolic leading input dim', '1')
    .option('--json', 'machine-readable report (schema offramp-cost/1)')
    .option('--md', 'Markdown report')
    .option('--no-nodes', 'leave out the per-node table')
    .option('-o, --out <file>', 'write the report to a file instead of stdout')
    .action(async (file: string, o: { cuts?: string; dim: string[]; batch: string; json?: boolean; md?: boolean; nodes: boolean; out?: string }) => {
      const model = loadModel(file);
      const report = await analyzeModel(model, { cuts: splitList(o.cuts), dims: parseDims(o.dim), batch: Number(o.batch) });
      emit(o.json ? costJson(report) : o.md ? costMarkdown(report, { nodes: o.nodes }) : costText(report, { nodes: o.nodes }), o.out);
    });
}

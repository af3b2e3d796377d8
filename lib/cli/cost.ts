// `offramp cost MODEL`: per-node and per-stage MACs, weights and activation memory.
import type { Command } from 'commander';
import { loadModel, saveModel } from '../graph/io.js';
import { completeShapes } from '../cost/analyze.js';
import { costModel } from '../cost/report.js';
import { reorderModel, type MemoryOrder } from '../cost/reorder.js';
import { checkSameOutputs } from '../cost/reorder-check.js';
import { dtypeByName } from '../onnx/dtype.js';
import { costJson, costMarkdown, costText } from '../report/cost.js';
import { budgetMarkdown, budgetText, overLine, reorderMarkdown, reorderText, storedLabel } from '../report/budget.js';
import { resolveTarget } from '../chip/target.js';
import { budgetOf, type Budget } from '../chip/budget.js';
import { usageError } from '../errors.js';
import { collect, emit, nameList, parseBatch, parseDims, OverBudget, modelAction } from './common.js';
import { modelReads, refuseInputsAsOutputs, splitReads } from './guard.js';
import { chooseChain, readManifestFile } from '../split/read.js';
import { targetFile, targetOptions } from './target-options.js';
import { costChain, isChainArgument } from './cost-chain.js';
import { costMeasured } from './cost-measured.js';

interface CostFlags {
  cuts?: string; dim: string[]; batch: string; json?: boolean; md?: boolean; nodes: boolean; out?: string;
  target?: string; flash?: string; ram?: string; clockMhz?: string; macsPerCycle?: string; int8MacsPerCycle?: string; int8?: boolean;
  reorder?: boolean; saveReordered?: string; float?: boolean; measured?: string; verbose?: boolean;
}

export function costCommand(program: Command): void {
  targetOptions(program.command('cost'))
    .description('count MACs, weights and peak activation memory, per node and per stage; check them against a target')
    .argument('<model>', 'ONNX model file, or a split folder (its stage files as written; on a build --int8 folder, the int8 chain)')
    .option('--cuts <values>', 'stage boundaries: comma-separated value (or node) names')
    .option('--dim <name=value>', 'bind a symbolic dim (repeatable)', collect, [])
    .option('--batch <n>', 'batch size for a symbolic leading input dim', '1')
    .option('--json', 'machine-readable report (schema offramp-cost/1)')
    .option('--md', 'Markdown report')
    .option('--no-nodes', 'leave out the per-node table')
    .option('--verbose', 'with a target: also say how each budget figure is counted')
    .option('-o, --out <file>', 'write the report to a file instead of stdout')
    .option('--reorder', 'reorder nodes within each stage to lower peak activation memory; report before and after')
    .option('--float', 'on a build --int8 folder: the float chain, not the int8 one it deploys')
    .option('--save-reordered <file>', 'write the reordered model, after checking in onnxruntime that its outputs equal the original\'s (implies --reorder)')
    .option('--measured <file>', 'offramp measure --json output for the quantized folder given: latency, flash and RAM as measured, beside the planned figures (the target defaults to the measured core\'s profile)')
    .action(modelAction(async (file: string, o: CostFlags) => {
      if (o.measured !== undefined) return costMeasured(file, { ...o, measured: o.measured });
      if (isChainArgument(file)) {
        const target = resolveTarget(o);
        const { manifest } = readManifestFile(chooseChain(file, { float: o.float }).file);
        refuseInputsAsOutputs([...splitReads(chooseChain(file, { float: o.float }).file, manifest), { file: targetFile(o.target), role: 'target profile' }], [o.out]);
        return costChain(file, o, target);
      }
      if (o.float) throw usageError('--float chooses the float chain of a build folder; this is a model file');
      // Target options are checked before the model is read, so a typo fails fast.
      const opts = { cuts: o.cuts === undefined ? [] : nameList(o.cuts, '--cuts'), dims: parseDims(o.dim), batch: parseBatch(o.batch) };
      const target = resolveTarget(o);
      if (o.int8 && !target) throw usageError('--int8 chooses how a target budget is judged: give --target or --flash/--ram/--clock-mhz/--macs-per-cycle');
      const model = loadModel(file);
      refuseInputsAsOutputs([...modelReads(model, file), { file: targetFile(o.target), role: 'target profile' }], [o.out, o.saveReordered]);
      const shapes = await completeShapes(model, opts);
      let report = costModel(model, { ...opts, shapes });
      let costed = model, reorder: MemoryOrder | undefined;
      if (o.reorder || o.saveReordered) {
        const r = reorderModel(model, report);
        costed = r.model; reorder = r.order;
        report = costModel(costed, { ...opts, shapes: { ...shapes, order: costed.graph.nodes.map((_, i) => i) } });
        if (o.saveReordered) {
          // A model that will be deployed is checked first: same outputs, bit for bit, on seeded inputs.
          if (reorder.stages.some((st) => st.moved)) {
            await checkSameOutputs(model, costed, report.model.inputs.map((t) => ({ name: t.name, dtype: dtypeByName(t.dtype)?.id ?? 0, shape: t.shape })), { file });
          }
          saveModel(costed, o.saveReordered);
        }
      }
      const budget: Budget | undefined = target && budgetOf(costed, report, target, o.int8 ? 'int8' : 'stored');
      const label = storedLabel(report);
      const extra = { ...(budget && { budget }), ...(reorder && { reorder }) };
      const text = o.json ? costJson(report, extra)
        : o.md ? [costMarkdown(report, { nodes: o.nodes }), reorder && reorderMarkdown(reorder), budget && budgetMarkdown(budget, label)].filter(Boolean).join('\n')
        : [costText(report, { nodes: o.nodes }), reorder && reorderText(reorder), budget && budgetText(budget, label, { verbose: o.verbose })].filter(Boolean).join('\n');
      emit(text, o.out);
      if (budget && !budget.fits) {
        const more = budget.over.length > 1 ? ` (and ${budget.over.length - 1} more)` : '';
        throw new OverBudget(`over budget: ${overLine(budget.over[0], label)}${more}`);
      }
    }));
}

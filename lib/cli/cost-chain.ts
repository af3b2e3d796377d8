// `offramp cost DIR`: the figures of a split folder's stage files as stored, one row a stage, and their
// budget against a target. On a build folder the chain costed is the one it deploys (DIR/int8 after
// --int8), as emit-c, replay and check choose it; --float takes the float chain.
import fs from 'node:fs';
import path from 'node:path';
import { loadModel } from '../graph/io.js';
import { completeShapes } from '../cost/analyze.js';
import { costModel } from '../cost/report.js';
import { checkBudget, stageFootprints, type Budget, type StageFootprint } from '../chip/budget.js';
import type { Target } from '../chip/target.js';
import { budgetMarkdown, budgetText, overLine } from '../report/budget.js';
import { bytes, mdTable, si, table, toJson } from '../report/units.js';
import { chooseChain, readManifestFile } from '../split/read.js';
import { verifyStageFiles } from '../split/commit.js';
import { MANIFEST_FILE } from '../split/manifest.js';
import { usageError } from '../errors.js';
import { OverBudget, emit } from './common.js';

/** Does the cost argument name a split folder (or its manifest) rather than a model file? */
export function isChainArgument(where: string): boolean {
  const st = fs.statSync(where, { throwIfNoEntry: false });
  if (st?.isDirectory()) return fs.existsSync(path.join(where, MANIFEST_FILE));
  return !!st?.isFile() && where.endsWith('.json');
}

export interface ChainCostFlags { verbose?: boolean; json?: boolean; md?: boolean; out?: string; float?: boolean; int8?: boolean; cuts?: string; reorder?: boolean; saveReordered?: string; dim: string[] }

export async function costChain(where: string, o: ChainCostFlags, target: Target | undefined): Promise<void> {
  // A split's stages are its cuts, and its files are what gets deployed: options that change either belong to a model file.
  for (const [set, name] of [[o.cuts, '--cuts'], [o.reorder, '--reorder'], [o.saveReordered, '--save-reordered'], [o.dim.length ? 1 : undefined, '--dim']] as const)
    if (set !== undefined && set !== false) throw usageError(`${name} applies to a model file; ${where} is a split folder, whose stage files are costed as written`);
  const choice = chooseChain(where, { float: o.float });
  const { manifest, file } = readManifestFile(choice.file);
  verifyStageFiles(manifest, file);
  const dir = path.dirname(file), quantized = !!manifest.quantization;
  const stages: StageFootprint[] = [];
  const rows: { index: number; file: string; macs: bigint; int8Macs: bigint; weightBytes: bigint; peakBytes: bigint; arenaBytes: bigint; handoverBytes: bigint }[] = [];
  for (const s of manifest.stages) {
    const sm = loadModel(path.join(dir, s.file));
    const report = costModel(sm, { shapes: await completeShapes(sm, { batch: 1 }) });
    const [fp] = stageFootprints(sm, report);
    const hand = (int8: boolean) => (ts: { dtype: string; bytes: number }[]) => BigInt(ts.reduce((a, t) => a + (int8 && t.dtype === 'float32' ? t.bytes / 4 : t.bytes), 0));
    const ins = s.inputs.filter((t) => t.from !== 'input'), outs = s.outputs.filter((t) => t.to.length);
    const stored = { ...fp.stored, handoverInBytes: hand(false)(ins), handoverOutBytes: hand(false)(outs) };
    // A quantized chain is int8 as stored; a float one has its int8 projection beside it.
    const int8 = quantized ? stored : { ...fp.int8, handoverInBytes: hand(true)(ins), handoverOutBytes: hand(true)(outs) };
    stages.push({ ...fp, index: s.index, cut: s.cut.join('+'), stored, int8 });
    rows.push({ index: s.index, file: s.file, macs: report.model.macs, int8Macs: report.model.int8Macs, weightBytes: fp.stored.weightBytes, peakBytes: fp.stored.peakBytes, arenaBytes: fp.stored.arenaBytes, handoverBytes: stored.handoverOutBytes });
  }
  const budget: Budget | undefined = target && checkBudget(stages, target, o.int8 && !quantized ? 'int8' : 'stored');
  const label = quantized ? 'int8 as stored' : 'as stored';
  const head = ['stage', 'file', 'MACs', 'int8 MACs', 'weights', 'peak act.', 'arena', 'hands over'];
  const cells = rows.map((r) => [String(r.index), r.file, si(r.macs), r.int8Macs ? si(r.int8Macs) : '-', bytes(r.weightBytes), bytes(r.peakBytes), bytes(r.arenaBytes), r.handoverBytes ? bytes(r.handoverBytes) : '-']);
  const sum = (k: 'macs' | 'weightBytes') => rows.reduce((a, r) => a + r[k], 0n);
  const totals = `${manifest.stages.length} stages, ${si(sum('macs'))} MACs through the whole chain, ${bytes(sum('weightBytes'))} of weights in the stage files`;
  const text = o.json
    ? toJson({ schema: 'offramp-cost-chain/1', chain: { manifest: choice.file, precision: choice.precision }, stages: rows, ...(budget && { budget }) }) + '\n'
    : o.md
      ? [choice.line, '', mdTable(head, cells), '', totals + '\n', ...(budget ? [budgetMarkdown(budget, label)] : [])].join('\n')
      : [choice.line, '', table(head, cells), '', totals + '\n', ...(budget ? [budgetText(budget, label, { verbose: o.verbose })] : [])].join('\n');
  emit(text, o.out);
  if (budget && !budget.fits) throw new OverBudget(`over budget: ${overLine(budget.over[0], label)}${budget.over.length > 1 ? ` (and ${budget.over.length - 1} more)` : ''}`);
}

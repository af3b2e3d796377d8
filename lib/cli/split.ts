// `offramp split MODEL --cuts A,B -o DIR`: stage files and their manifest.
import { FINAL } from '../report/words.js';
import type { Command } from 'commander';
import { loadModel } from '../graph/io.js';
import { cutsAtFractions, resolveCut, scanModel } from '../cuts/scan.js';
import { writeSplit } from '../split/manifest.js';
import { exitCuts } from '../cuts/exits.js';
import { bytes, si, table } from '../report/units.js';
import { usageError } from '../errors.js';
import { collect, emit, nameList, parseBatch, parseDims, parseFractions, modelAction } from './common.js';
import { modelReads, refuseInputsAsOutputs } from './guard.js';
import { checkOutDir } from '../util/fsx.js';

export function splitCommand(program: Command): void {
  program.command('split')
    .description('cut the model into stage-N.onnx files that run one after another, with manifest.json')
    .argument('<model>', 'ONNX model file')
    .option('--cuts <list>', "cut tensors, comma-separated; join the tensors of a multi-tensor cut with '+' (default for a grafted model: its exits' cuts)")
    .option('--at <list>', 'the clean cuts nearest these MAC shares, e.g. 25%,50%,75%')
    .requiredOption('-o, --out <dir>', 'folder for the stage files and manifest.json')
    .option('--json', 'print the manifest instead of a summary')
    .option('--reorder', 'reorder each stage file\'s nodes to lower its peak activation memory (the order an interpreter runs)')
    .option('--dim <name=value>', 'bind a symbolic dim (repeatable)', collect, [])
    .option('--batch <n>', 'batch size for a symbolic leading input dim', '1')
    .action(modelAction(async (file: string, o: { cuts?: string; at?: string; out: string; json?: boolean; reorder?: boolean; dim: string[]; batch: string }) => {
      if (o.cuts !== undefined && o.at !== undefined) throw usageError('give one of --cuts and --at, not both');
      const named = o.cuts === undefined ? undefined : nameList(o.cuts, '--cuts'), fractions = o.at === undefined ? undefined : parseFractions(o.at);
      const opts = { dims: parseDims(o.dim), batch: parseBatch(o.batch) };
      const model = loadModel(file);
      refuseInputsAsOutputs(modelReads(model, file), [], [{ dir: o.out, names: /^(stage-\d+(\.[0-9a-f]{16})?\.onnx|manifest\.json)$/ }]);
      checkOutDir(o.out);
      // A grafted model already says where its stages end: one exit per stage.
      const atExits = !named && !fractions ? exitCuts(model) : [];
      if (!named && !fractions && !atExits.length) throw usageError('give --cuts or --at (the model has no exit heads to cut at)');
      const plan = await scanModel(model, opts);
      const cuts = named || atExits.length ? (named ?? atExits).map((c) => resolveCut(plan, c)) : cutsAtFractions(plan, fractions!);
      const { manifest } = writeSplit(plan, cuts, o.out, file, { reorder: o.reorder });
      if (o.json) { emit(JSON.stringify(manifest, null, 2) + '\n'); return; }
      const rows = manifest.stages.map((s) => [
        s.file, String(s.nodes), si(s.macs), `${(s.macFraction * 100).toFixed(1)}%`, bytes(s.weightBytes), bytes(s.peakActivationBytes), s.arenaBytes === undefined ? '-' : bytes(s.arenaBytes),
        s.cut.join('+') || FINAL, s.cut.length ? bytes(s.handoverBytes) : '-', s.exits.join(',') || FINAL,
      ]);
      const lines = [
        `split ${file} into ${manifest.stages.length} stages in ${o.out} (${manifest.order === 'block' ? 'block-keeping' : 'file'} order)`, '',
        table(['stage', 'nodes', 'MACs', 'share', 'weights', 'peak act.', 'arena', 'hands over', 'bytes', 'exits'], rows),
      ];
      const re = manifest.stages.filter((s) => s.reorder);
      if (re.length) {
        lines.push('', 'memory-aware order of the stage files (own peak, first order → reordered):');
        for (const s of re) lines.push(`  ${s.file}: ${bytes(s.reorder!.before)} → ${bytes(s.reorder!.after)}`);
      }
      if (manifest.sharedWeights.length) {
        lines.push('', `shared weights copied into several stages (${bytes(manifest.sharedWeights.reduce((a, w) => a + w.bytes * (w.stages.length - 1), 0))} extra):`);
        for (const w of manifest.sharedWeights) lines.push(`  ${w.name} (${bytes(w.bytes)}) in stages ${w.stages.join(', ')}`);
      }
      emit(lines.join('\n') + '\n');
    }));
}

// `offramp build MODEL --data X.npy [--labels y.npy] [--target …] -o DIR`: the whole job in one command.
import path from 'node:path';
import type { Command } from 'commander';
import { buildExits } from '../pipeline/build.js';
import { parseHead } from '../heads/spec.js';
import { resolveTarget } from '../chip/target.js';
import { buildHtml, buildJson, buildText } from '../report/build.js';
import { overLine, storedLabel } from '../report/budget.js';
import { writeAtomic } from '../util/atomic.js';
import { usageError } from '../errors.js';
import { emit, OverBudget } from './common.js';
import { targetOptions } from './target-options.js';

interface BuildFlags {
  data: string; labels?: string; out: string; maxDrop: string; maxExits: string; candidates: string; head: string;
  seed: string; json?: boolean; target?: string; flash?: string; ram?: string; clockMhz?: string; macsPerCycle?: string;
  int8MacsPerCycle?: string; int8?: boolean; reorder?: boolean;
}

const whole = (v: string, what: string, min: number) => {
  const x = Number(v);
  if (!Number.isInteger(x) || x < min) throw usageError(`${what} takes a whole number ≥ ${min}, not '${v}'`);
  return x;
};

export function buildCommand(program: Command): void {
  const cmd = targetOptions(program.command('build'));
  const int8 = cmd.options.find((x) => x.long === '--int8');
  if (int8) int8.description = 'also quantize the stages to int8 (DIR/int8, calibrated on the fitting rows), tune the policy on the int8 chain, write its firmware, and judge the int8 files as stored';
  cmd
    .description('place, fit and tune exits, split into stages, check the chain and judge it against a target, in one go')
    .argument('<model>', 'trained ONNX classifier (first output: logits)')
    .requiredOption('--data <file>', 'calibration inputs (.npy [N, …]); even rows fit the heads, odd rows tune the policy')
    .option('--labels <file>', 'integer labels .npy [N]; without them everything is judged against the model\'s own answers')
    .requiredOption('-o, --out <dir>', 'output folder: model.onnx, stage files, manifest.json, report.html, report.json')
    .option('--max-drop <points>', 'accuracy the exits may cost, in percentage points', '1')
    .option('--max-exits <n>', 'most exits to place', '3')
    .option('--candidates <n>', 'candidate cuts to fit heads at', '6')
    .option('--head <kind>', 'linear, mlp:H or conv:C', 'linear')
    .option('--seed <n>', 'seed of every random choice', '1')
    .option('--reorder', 'write each stage file in a memory-aware node order (lower peak activation memory)')
    .option('--json', 'print the report as JSON (schema offramp-build/1)')
    .action(async (file: string, o: BuildFlags) => {
      const target = resolveTarget(o);
      const maxDrop = Number(o.maxDrop);
      if (!(maxDrop >= 0)) throw usageError(`--max-drop takes percentage points ≥ 0, not '${o.maxDrop}'`);
      const tty = process.stderr.isTTY && !o.json;
      const started = Date.now();
      const r = await buildExits(file, {
        data: o.data, labels: o.labels, out: o.out, target, int8: o.int8, maxDrop,
        maxExits: whole(o.maxExits, '--max-exits', 1), candidates: whole(o.candidates, '--candidates', 1),
        head: parseHead(o.head), seed: whole(o.seed, '--seed', 0), reorder: o.reorder,
        progress: tty ? (step, detail) => process.stderr.write(`${((Date.now() - started) / 1000).toFixed(1).padStart(5)} s  ${step.padEnd(8)} ${detail}\n`) : undefined,
      });
      const json = buildJson(r);
      writeAtomic(path.join(o.out, 'report.json'), json);
      writeAtomic(path.join(o.out, 'report.html'), buildHtml(r));
      emit(o.json ? json : buildText(r) + `\nreport     ${path.join(o.out, 'report.html')} (and report.json)\n`);
      if (r.budget && !r.budget.fits) throw new OverBudget(`over budget: ${overLine(r.budget.over[0], storedLabel(r.cost))}`);
    });
}

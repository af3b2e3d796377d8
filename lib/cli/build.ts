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
  int8MacsPerCycle?: string; int8?: boolean; reorder?: boolean; confidence: string; unlabelled?: string;
}

const whole = (v: string, what: string, min: number) => {
  const x = Number(v);
  if (!Number.isInteger(x) || x < min) throw usageError(`${what} takes a whole number ≥ ${min}, not '${v}'`);
  return x;
};

export function buildCommand(program: Command): void {
  targetOptions(program.command('build'))
    .description('place, fit and tune exits, split into stages, check the chain and judge it against a target, in one go')
    .argument('<model>', 'trained ONNX classifier (first output: logits)')
    .requiredOption('--data <file>', 'calibration inputs (.npy [N, …]); even rows fit the heads, odd rows tune the policy')
    .option('--labels <file>', 'integer labels .npy [N]; without them everything is judged against the model\'s own answers')
    .requiredOption('-o, --out <dir>', 'output folder: model.onnx, stage files, manifest.json, report.html, report.json')
    .option('--max-drop <points>', 'accuracy the exits may cost, in percentage points', '1')
    .option('--confidence <C>', 'the promise holds with probability at least C over the draw of the data', '0.95')
    .option('--unlabelled <file>', 'extra inputs without labels (.npy): they tighten the bound on disagreement with the full model')
    .option('--max-exits <n>', 'most exits to place', '3')
    .option('--candidates <n>', 'candidate cuts to fit heads at', '6')
    .option('--head <kind>', 'linear, mlp:H, conv:C or grid:G', 'linear')
    .option('--seed <n>', 'seed of every random choice', '1')
    .option('--reorder', 'write each stage file in a memory-aware node order (lower peak activation memory)')
    .option('--json', 'print the report as JSON (schema offramp-build/2)')
    .action(async (file: string, o: BuildFlags) => {
      const target = resolveTarget(o);
      if (o.int8 && !target) throw usageError('--int8 chooses how a target budget is judged: give --target or --flash/--ram/--clock-mhz/--macs-per-cycle');
      const maxDrop = Number(o.maxDrop);
      if (!(maxDrop >= 0)) throw usageError(`--max-drop takes percentage points ≥ 0, not '${o.maxDrop}'`);
      const confidence = Number(o.confidence);
      if (!(confidence > 0 && confidence < 1)) throw usageError(`--confidence takes a number strictly between 0 and 1, not '${o.confidence}'`);
      const tty = process.stderr.isTTY && !o.json;
      const started = Date.now();
      const r = await buildExits(file, {
        data: o.data, labels: o.labels, out: o.out, target, int8: o.int8, maxDrop, confidence, unlabelled: o.unlabelled,
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

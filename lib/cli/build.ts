// `offramp build MODEL --data X.npy [--labels y.npy] [--target …] -o DIR`: the whole job in one command.
import path from 'node:path';
import type { Command } from 'commander';
import { buildExits } from '../pipeline/build.js';
import { parseHead } from '../heads/spec.js';
import { resolveTarget } from '../chip/target.js';
import { buildHtml, buildJson, buildText } from '../report/build.js';
import { overLine, storedLabel } from '../report/budget.js';
import { usageError } from '../errors.js';
import { CONFIDENCE_RANGE, emit, OverBudget, parseNumber, modelAction } from './common.js';
import { targetFile, targetOptions } from './target-options.js';
import { modelReads, refuseInputsAsOutputs, refuseSameRows } from './guard.js';
import { loadModel } from '../graph/io.js';
import { checkOutDir } from '../util/fsx.js';
import { toolchainStatus } from '../measure/toolchain.js';
import { coreOf } from '../measure/cores.js';

interface BuildFlags {
  data: string; labels?: string; out: string; maxDrop: string; maxExits: string; candidates: string; head?: string;
  seed: string; json?: boolean; target?: string; flash?: string; ram?: string; clockMhz?: string; macsPerCycle?: string;
  int8MacsPerCycle?: string; int8?: boolean; reorder?: boolean; verbose?: boolean; confidence: string; unlabelled?: string;
  measure?: boolean; core: string; measureRows: string;
}

/** Sets of up to `exits` exits out of `candidates` cuts: what build tunes one by one. */
const setCount = (candidates: number, exits: number) => {
  let sets = 0, c = 1;
  for (let k = 1; k <= Math.min(exits, candidates); k++) { c = (c * (candidates - k + 1)) / k; sets += c; }
  return sets;
};
/** Build tunes every set of exits; past this many the run takes hours, not minutes. */
const MAX_SETS = 5000;

export function buildCommand(program: Command): void {
  const cmd = targetOptions(program.command('build'));
  const int8 = cmd.options.find((x) => x.long === '--int8');
  if (int8) int8.description = 'also quantize the stages to int8 (DIR/int8, calibrated on the fitting rows), tune the policy on the int8 chain, write its firmware, and judge the int8 files as stored';
  cmd
    .description('place, fit and tune exits, split into stages, check the chain and judge it against a target, in one go')
    .argument('<model>', 'trained ONNX classifier (first output: logits)')
    .requiredOption('--data <file>', 'calibration inputs (.npy [N, …]); even rows fit the heads, odd rows tune the policy')
    .option('--labels <file>', 'integer labels .npy [N]; without them everything is judged against the model\'s own answers')
    .requiredOption('-o, --out <dir>', 'output folder: grafted model, stage files, manifest.json, report.html, report.json, firmware/')
    .option('--max-drop <points>', 'accuracy the exits may cost, in percentage points', '1')
    .option('--confidence <C>', 'the promise holds with probability at least C over the draw of the data', '0.95')
    .option('--unlabelled <file>', 'extra inputs without labels (.npy): they tighten the bound on disagreement with the full model')
    .option('--max-exits <n>', 'most exits to place', '3')
    .option('--candidates <n>', 'candidate cuts to fit heads at', '6')
    .option('--head <kind>', 'linear, mlp:H, conv:C or grid:G (default: chosen per exit among linear, grid:2, grid:4 and mlp:32)')
    .option('--seed <n>', 'seed of every random choice', '1')
    .option('--reorder', 'write each stage file in a memory-aware node order (lower peak activation memory)')
    .option('--measure', 'with --int8: measure the int8 firmware on an emulated Cortex-M (QEMU), rows of --data in file order; the report leads with what the exits save there')
    .option('--core <core>', 'core --measure emulates: m4f, m7 or m55', 'm4f')
    .option('--measure-rows <n>', 'rows --measure runs (the first ones of --data)', '200')
    .option('--json', 'print the report as JSON (schema offramp-build/3)')
    .option('--verbose', 'also print the cuts, the method, the stage files and the budget per precision with how each figure is counted')
    .action(modelAction(async (file: string, o: BuildFlags) => {
      const maxDrop = parseNumber(o.maxDrop, '--max-drop', { min: 0, max: 100 });
      const confidence = parseNumber(o.confidence, '--confidence', CONFIDENCE_RANGE);
      const maxExits = parseNumber(o.maxExits, '--max-exits', { int: true, min: 1, max: 16 });
      const candidates = parseNumber(o.candidates, '--candidates', { int: true, min: 1, max: 64 });
      const seed = parseNumber(o.seed, '--seed', { int: true, min: 0, max: 2 ** 32 - 1 });
      if (setCount(candidates, maxExits) > MAX_SETS) throw usageError(`--candidates ${candidates} with --max-exits ${maxExits} makes ${setCount(candidates, maxExits)} sets of exits to tune; keep it under ${MAX_SETS}`);
      const target = resolveTarget(o);
      if (o.int8 && !target) throw usageError('--int8 chooses how a target budget is judged: give --target or --flash/--ram/--clock-mhz/--macs-per-cycle');
      if (o.measure && !o.int8) throw usageError('--measure runs the int8 firmware: give --int8 too');
      const measureRows = parseNumber(o.measureRows, '--measure-rows', { int: true, min: 1, max: 100_000 });
      if (o.measure) {
        const tools = toolchainStatus();
        if (!tools.ready) throw usageError(tools.message);
        coreOf(o.core, '--core');
      }
      refuseSameRows(o.data, o.unlabelled);
      const model = loadModel(file);
      refuseInputsAsOutputs([...modelReads(model, file), { file: o.data, role: 'data' }, { file: o.labels, role: 'labels' }, { file: o.unlabelled, role: 'unlabelled data' }, { file: targetFile(o.target), role: 'target profile' }], [], [
        { dir: o.out, names: /^((model|stage-\d+)(\.[0-9a-f]{16})?\.onnx|manifest\.json|report\.(json|html)|firmware|int8)$/ },
        { dir: path.join(o.out, 'firmware'), names: /^offramp_\w+\.[ch]$/ },
      ]);
      checkOutDir(o.out);
      const tty = process.stderr.isTTY && !o.json;
      const started = Date.now();
      const r = await buildExits(file, {
        data: o.data, labels: o.labels, out: o.out, target, int8: o.int8, maxDrop, confidence, unlabelled: o.unlabelled,
        maxExits, candidates, head: o.head === undefined ? undefined : parseHead(o.head), seed, reorder: o.reorder, ...(o.measure && { measure: { core: o.core, rows: measureRows } }),
        progress: tty ? (step, detail) => process.stderr.write(`${((Date.now() - started) / 1000).toFixed(1).padStart(5)} s  ${step.padEnd(8)} ${detail}\n`) : undefined,
        // The reports go in with the manifest they describe (after it), never beside another.
        describe: (b) => [{ name: 'report.json', data: buildJson(b) }, { name: 'report.html', data: buildHtml(b) }],
      });
      const json = buildJson(r);
      emit(o.json ? json : buildText(r, { verbose: o.verbose }));
      if (r.budget && !r.budget.fits) throw new OverBudget(`over budget: ${overLine(r.budget.over[0], storedLabel(r.cost))}`);
    }));
}

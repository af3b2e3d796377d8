// `offramp graft MODEL (--cuts A,B | --at 25%,50%) --data X.npy [--labels y.npy] --head linear -o OUT.onnx`:
// fit exit heads on calibration data (backbone frozen) and attach them as exit-N outputs.
import type { Command } from 'commander';
import { loadModel, saveModel } from '../graph/io.js';
import { completeShapes } from '../cost/analyze.js';
import { planCuts, cutsAtFractions, type CutPlan } from '../cuts/scan.js';
import { graftExits, classifierIO, type GraftResult } from '../heads/fit-heads.js';
import { parseHead, parseLayout } from '../heads/spec.js';
import { dataSource, readLabels } from '../heads/sources.js';
import { si, table, toJson } from '../report/units.js';
import { trialsText } from '../report/heads.js';
import { usageError } from '../errors.js';
import { collect, emit, nameList, parseDims, parseFractions, parseNumber, modelAction } from './common.js';
import { modelReads, refuseInputsAsOutputs } from './guard.js';
import { progressBar } from './progress.js';

export const GRAFT_SCHEMA = 'offramp-graft/1';

interface GraftCliOptions {
  cuts?: string; at?: string; data: string; labels?: string; head?: string; out: string;
  seed: string; l2: string; temperature: string; layout?: string; heldOut: string; dim: string[]; json?: boolean;
}



const pct = (x: number | undefined) => (x === undefined || Number.isNaN(x) ? '-' : `${(100 * x).toFixed(1)}%`);

export function graftText(r: GraftResult, out: string): string {
  const rows = r.heads.map((h) => {
    const e = h.record;
    return [e.output, e.cut, e.head, si(e.macs), si(e.params), pct(e.fit.accuracy), pct(e.fit.agreement), e.fit.loss.toPrecision(4), `${e.fit.samples}/${e.fit.heldOut}`];
  });
  return `${table(['exit', 'cut', 'head', 'MACs', 'params', 'accuracy', 'agreement', 'loss', 'fit/held'], rows)}\n`
    + `accuracy and agreement (with the final output) on the held-out rows; wrote ${out}\n`
    + choiceText(r)
    + r.warnings.map((w) => `warning: ${w}\n`).join('');
}

/** One line per chosen head: what each kind tried there would save per frame, as estimated on the held-out rows. */
function choiceText(r: GraftResult): string {
  const chosen = r.heads.filter((h) => h.record.choice);
  if (!chosen.length) return '';
  return `heads chosen by the MACs they would save per frame (held-out rows; --head names one for every exit):\n`
    + chosen.map((h) => `  ${h.record.output}: ${h.record.head}  (${trialsText(h.record.choice!.tried, ', ')})\n`).join('');
}

export function graftJson(r: GraftResult, out: string): string {
  return `${toJson({ schema: GRAFT_SCHEMA, out, exits: r.heads.map((h) => h.record), ...(r.warnings.length && { warnings: r.warnings }) })}\n`;
}


/**
 * The cuts `--at` asks for, one exit per share: two shares landing on the same cut, or a cut at the end
 * of the computation (an exit there runs every MAC, so it can save nothing), are refused by name.
 */
function exitCutsAt(plan: CutPlan, fractions: number[], given: string): string[] {
  const shares = nameList(given, '--at');
  const at = fractions.map((f) => cutsAtFractions(plan, [f])[0]);
  const pct = (x: number) => `${(x * 100).toFixed(1)} %`;
  at.forEach((c, i) => {
    const j = at.findIndex((d) => d.step === c.step);
    if (j < i) throw usageError(`--at ${shares[j]} and ${shares[i]} both land on the cut '${c.tensors[0].name}' (at ${pct(c.macFraction)} of the MACs): one exit there, not two; give shares further apart or --cuts`);
    // Past 99.9 % an exit's head costs about what it skips (a linear head is the size of the classifier it replaces).
    if (c.macFraction > 0.999) throw usageError(`--at ${shares[i]}: the nearest clean cut, '${c.tensors[0].name}', comes after ${(c.macFraction * 100).toFixed(2)} % of the MACs: an exit there saves nothing; give a smaller share or --cuts`);
  });
  return [...at].sort((a, b) => a.step - b.step).map((c) => c.tensors[0].name);
}

export function graftCommand(program: Command): void {
  program.command('graft')
    .description('fit exit heads on calibration data and attach them as outputs exit-0, exit-1, …')
    .argument('<model>', 'ONNX classifier (first output: logits)')
    .option('--cuts <values>', 'cut tensors: comma-separated value (or node) names')
    .option('--at <fractions>', 'nearest clean cuts to these MAC fractions, e.g. 25%,50%')
    .requiredOption('--data <file>', 'calibration inputs: .npy [N, …] or a folder of test_data_set_*/input_0.pb')
    .option('--labels <file>', 'integer labels .npy [N]; without them heads distil the final output')
    .option('--head <kind>', 'linear, mlp:H, conv:C or grid:G (default: chosen per exit among linear, grid:2, grid:4 and mlp:32)')
    .requiredOption('-o, --out <file>', 'grafted model to write')
    .option('--seed <n>', 'seed of the held-out split and of any random initialisation', '1')
    .option('--l2 <x>', 'L2 strength on head weights (mean loss + l2/2·‖W‖²)', '1e-5')
    .option('--temperature <t>', 'softening of the final output when distilling', '1')
    .option('--layout <layout>', 'cut tensor layout: NCHW, NHWC, NCL or NTD (default by rank: 4 → NCHW, 3 → NCL)')
    .option('--held-out <share>', 'share of rows held out for early stopping and scoring', '0.1')
    .option('--dim <name=value>', 'bind a symbolic dim (repeatable)', collect, [])
    .option('--json', `machine-readable report (schema ${GRAFT_SCHEMA})`)
    .action(modelAction(async (file: string, o: GraftCliOptions) => {
      if (!o.cuts === !o.at) throw usageError('give exactly one of --cuts and --at');
      const head = o.head === undefined ? undefined : parseHead(o.head), layout = o.layout ? parseLayout(o.layout) : undefined;
      const seed = parseNumber(o.seed, '--seed', { int: true, min: 0, max: 2 ** 32 - 1 });
      const l2 = parseNumber(o.l2, '--l2', { min: 0 }), temperature = parseNumber(o.temperature, '--temperature', { min: 0, above: true });
      const heldOut = parseNumber(o.heldOut, '--held-out', { min: 0, max: 1, below: true });
      const dims = parseDims(o.dim), fractions = o.at === undefined ? [] : parseFractions(o.at), named = o.cuts === undefined ? [] : nameList(o.cuts, '--cuts');
      const model = loadModel(file);
      refuseInputsAsOutputs([...modelReads(model, file), { file: o.data, role: 'data' }, { file: o.labels, role: 'labels' }], [o.out]);
      const shapes = await completeShapes(model, { dims, batch: 1 });
      const cuts = o.cuts ? named : exitCutsAt(planCuts(model, shapes), fractions, o.at!);
      const io = classifierIO(model, shapes);
      const data = dataSource(o.data, io.declared, io.sample);
      const labels = o.labels ? readLabels(o.labels, { rows: data.rows, of: o.data, classes: io.classes }) : undefined;
      const r = await graftExits(model, data, {
        cuts, head, layout, labels, l2, temperature, seed, heldOut, shapes,
        progress: progressBar(!!process.stderr.isTTY && !o.json),
      });
      saveModel(r.model, o.out);
      emit(o.json ? graftJson(r, o.out) : graftText(r, o.out));
    }));
}

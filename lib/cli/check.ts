// `offramp check DIR --against MODEL`: the chain computes what the model does.
import fs from 'node:fs';
import path from 'node:path';
import { createHash } from 'node:crypto';
import type { Manifest } from '../split/manifest.js';
import type { Command } from 'commander';
import { loadChain } from '../run/chain.js';
import { checkAgreement, checkChain, npySamples, randomSamples } from '../run/check.js';
import { table, toJson } from '../report/units.js';
import { OfframpError, usageError } from '../errors.js';
import { collect, emit, parseNumber } from './common.js';
import { FINAL } from '../report/words.js';
import { chooseChain } from '../split/read.js';

/** The model a manifest names as its source, when its bytes are still the ones recorded; else a usage error asking for --against. */
function sourceModel(dir: string, m: Manifest): string {
  const file = path.join(dir, m.source.file);
  let same = false;
  try { same = createHash('sha256').update(fs.readFileSync(file)).digest('hex') === m.source.sha256; } catch { same = false; }
  if (!same) throw usageError(`${file}: the source model the manifest names is missing or changed since the split; give --against MODEL`);
  return file;
}

const num = (x: number) => (x === 0 ? '0' : x.toExponential(2));

export function checkCommand(program: Command): void {
  program.command('check')
    .description('run the model and the split chain on the same inputs and compare every output')
    .argument('<dir>', 'split folder (or its manifest.json)')
    .option('--against <model>', 'the source ONNX model (default: the model the manifest names as its source, if it is still there unchanged)')
    .option('--data <file>', '.npy inputs, [N, ...]; NAME=FILE per input for several (repeatable)', collect, [])
    .option('--samples <n>', 'samples to run (default: every row of --data, or 4 random ones)')
    .option('--seed <n>', 'seed of the random inputs', '1')
    .option('--rtol <x>', 'relative tolerance for float outputs (integers must be exact)', '1e-5')
    .option('--min-agreement <share>', 'quantized chains: least share of samples whose top-1 class matches the model (0 reports only)', '0')
    .option('--json', 'machine-readable result')
    .option('--float', 'on a build --int8 folder: the float chain, not the int8 one it deploys')
    .action(async (where: string, o: { against?: string; data: string[]; samples?: string; seed: string; rtol: string; minAgreement: string; json?: boolean; float?: boolean }) => {
      const choice = chooseChain(where, { float: o.float });
      const dir = choice.file;
      const chainJson = { manifest: choice.file, precision: choice.precision };
      const n = o.samples === undefined ? (o.data.length ? Infinity : 4) : parseNumber(o.samples, '--samples', { int: true, min: 1, max: 1_000_000 });
      const rtol = parseNumber(o.rtol, '--rtol', { min: 0 }), seed = parseNumber(o.seed, '--seed', { int: true, min: 0, max: 2 ** 32 - 1 });
      const minAgreement = parseNumber(o.minAgreement, '--min-agreement', { min: 0, max: 1 });
      // A float chain is judged with onnxruntime's fusion off on both sides (runtime/ort.ts Optimization): the same
      // kernel per node, so a difference is the split's, not a fusion made in the whole model only.
      const chain = await loadChain(dir, { optimization: choice.precision === 'float' ? 'disabled' : 'all' });
      try {
        const against = o.against ?? sourceModel(chain.dir, chain.manifest);
        // the model's own output is 'final' in every table (docs/glossary.md); exits and other outputs keep their names
        const exitNames = new Set(chain.manifest.stages.flatMap((st) => st.exits));
        const finals = chain.manifest.outputs.filter((t) => !exitNames.has(t.name));
        const label = (name: string) => (finals.length === 1 && exitNames.size && name === finals[0].name ? `${FINAL} (${name})` : name);
        const inputs = chain.manifest.inputs;
        let samples;
        if (o.data.length) {
          const files: Record<string, string> = {};
          for (const d of o.data) {
            const m = /^([^=]+)=(.+)$/.exec(d);
            if (m && !fs.existsSync(d)) files[m[1]] = m[2];
            else if (inputs.length === 1) files[inputs[0].name] = d;
            else throw usageError(`the model has ${inputs.length} inputs: give --data NAME=FILE for each`);
          }
          samples = npySamples(inputs, files, n);
          if (!samples.length) throw new OfframpError('data', 'no samples in the data', o.data[0]);
        } else samples = randomSamples(inputs, n, seed);
        const source = o.data.length ? 'data' : `random seed ${seed}`;
        if (chain.manifest.quantization) {
          // An int8 chain is judged as a classifier: top-1 agreement and the largest logit error, not float tolerance.
          const q = await checkAgreement(chain, against, samples, minAgreement);
          if (o.json) emit(toJson({ schema: 'offramp-check/1', chain: chainJson, quantized: true, ...q, source }) + '\n');
          else {
            const rows = q.outputs.map((a) => [label(a.name), `${a.agree}/${a.samples}`, `${(a.agreement * 100).toFixed(2)} %`, num(a.maxAbs), a.maxSteps === undefined ? '-' : a.maxSteps.toFixed(1), a.ok ? 'ok' : `FAIL${a.note ? ` (${a.note})` : ''}`]);
            emit(`${choice.line}\n${q.samples} samples (${o.data.length ? 'from data' : `random, seed ${seed}`}), int8 chain: top-1 agreement with the model${minAgreement ? `, at least ${(minAgreement * 100).toFixed(2)} %` : ''}\n\n` +
              `${table(['output', 'same top-1', 'agreement', 'max abs', 'int8 steps', 'result'], rows)}\n`);
          }
          if (!q.ok) throw new OfframpError('runtime', `the int8 chain agrees with ${against} on less than ${(minAgreement * 100).toFixed(2)} % of samples, or an output is missing`, dir);
          return;
        }
        const r = await checkChain(chain, against, samples, { rtol });
        if (o.json) emit(toJson({ schema: 'offramp-check/1', chain: chainJson, ...r, rtol, source }) + '\n');
        else {
          const rows = r.diffs.map((d) => [label(d.name), d.dtype, String(d.elements), num(d.maxAbs), num(d.maxRel), String(d.mismatched), d.ok ? 'ok' : `FAIL${d.note ? ` (${d.note})` : ''}`]);
          emit(`${choice.line}\n${r.samples} samples (${o.data.length ? 'from data' : `random, seed ${seed}`}), float rtol ${o.rtol}, integers exact, graph optimisation off on both sides\n\n` +
            `${table(['output', 'dtype', 'elements', 'max abs', 'max rel', 'over', 'result'], rows)}\n`);
        }
        if (!r.ok) throw new OfframpError('runtime', `the chain differs from ${against} beyond tolerance`, dir);
      } finally { await chain.release(); }
    });
}

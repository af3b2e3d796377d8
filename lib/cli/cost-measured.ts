// `offramp cost DIR --measured M.json`: the budget of a quantized folder from `offramp measure --json`
// output for that folder: measured latency per stage and to each exit (instructions × the stated
// cycles-per-instruction estimate, at the target's clock), flash and RAM of the firmware, each beside
// the planned figure of the stage files. A measurement of other stage files is refused in one line.
import fs from 'node:fs';
import path from 'node:path';
import { loadModel } from '../graph/io.js';
import { completeShapes } from '../cost/analyze.js';
import { costModel } from '../cost/report.js';
import { checkBudget, stageFootprints, type Budget, type StageFootprint } from '../chip/budget.js';
import { BUILTIN_TARGETS, resolveTarget, type TargetOptions } from '../chip/target.js';
import { measuredBudget, type MeasuredBudget } from '../chip/measured.js';
import { budgetMarkdown, budgetText, duration } from '../report/budget.js';
import { bytes, mdTable, si, table, toJson } from '../report/units.js';
import { chooseChain, readManifestFile } from '../split/read.js';
import { sha256, verifyStageFiles } from '../split/commit.js';
import type { Manifest } from '../split/manifest.js';
import { MANIFEST_FILE } from '../split/manifest.js';
import { readRegular } from '../util/fsx.js';
import { parseJsonText } from '../util/json.js';
import { OfframpError, usageError } from '../errors.js';
import { OverBudget, emit } from './common.js';
import { refuseInputsAsOutputs, splitReads } from './guard.js';
import { targetFile } from './target-options.js';

export const COST_MEASURED_SCHEMA = 'offramp-cost-measured/1';

export interface MeasuredFlags extends TargetOptions {
  measured: string; json?: boolean; md?: boolean; out?: string;
  cuts?: string; reorder?: boolean; saveReordered?: string; dim: string[]; int8?: boolean; float?: boolean;
}

/** The int8 chain of `where`: a quantized folder (or its manifest), or the DIR/int8 a build --int8 folder deploys. */
function measuredChain(where: string): string {
  const st = fs.statSync(where, { throwIfNoEntry: false });
  if (!st) throw new OfframpError('io', 'no such folder', where);
  if (st.isFile() && !where.endsWith('.json')) throw usageError(`--measured applies to the quantized folder offramp measure ran on; ${where} is a model file`);
  if (st.isDirectory() && !fs.existsSync(path.join(where, MANIFEST_FILE))) throw usageError(`--measured applies to a quantized folder (the one offramp measure ran on); ${where} has no manifest`);
  const c = chooseChain(where);
  if (c.precision !== 'int8') throw usageError(`--measured: ${where} is a float folder; the firmware measured is int8 (give its quantized folder, or the build --int8 folder)`);
  return c.file;
}

interface Measurement {
  schema: string; manifestSha256?: string; core: string; machine: string;
  basis: { cyclesPerInstruction: number };
  flash: { libraryBytes: number }; ram: { libraryBytes: number; stackPeakBytes: number };
  stages: { index: number; file: string; macs: number; instructions: number }[];
  decisions: { exit: number; meanInstructions: number }[];
  frames: number; perFrame: { policy: number; full: number };
}

function readMeasurement(file: string): Measurement {
  const j = parseJsonText(readRegular(file, 'measurement').toString('utf8'), 'offramp measure --json output');
  if (!j.ok) throw new OfframpError('data', j.message, file);
  const m = j.value as Measurement;
  const fail = (what: string) => new OfframpError('data', what, file);
  if (!m || typeof m !== 'object' || m.schema !== 'offramp-measure/1') throw fail('not offramp measure --json output (schema offramp-measure/1)');
  const num = (x: unknown) => typeof x === 'number' && Number.isFinite(x) && x >= 0;
  if (!Array.isArray(m.stages) || !m.stages.length || m.stages.some((s) => typeof s?.file !== 'string' || !num(s.instructions) || !num(s.macs))) throw fail('its stages are missing or malformed');
  if (!num(m.basis?.cyclesPerInstruction) || !num(m.flash?.libraryBytes) || !num(m.ram?.libraryBytes) || !num(m.ram?.stackPeakBytes) || !Array.isArray(m.decisions) || !num(m.perFrame?.policy) || !num(m.perFrame?.full))
    throw fail('its flash, RAM, decisions or per-frame figures are missing or malformed');
  return m;
}

/** Same chain? The manifest's SHA-256, or else the same stage files (content-named) in the same order. */
function matchLine(m: Measurement, manifest: Manifest, bytes: Buffer, file: string, measuredFile: string): string | undefined {
  if (m.manifestSha256 && m.manifestSha256 === sha256(bytes)) return undefined;
  const k = manifest.stages.findIndex((s, i) => m.stages[i]?.file !== s.file);
  if (k >= 0 || m.stages.length !== manifest.stages.length) {
    const where = k >= 0 ? `stage ${k}: ${m.stages[k] ? `'${m.stages[k]!.file}'` : 'none'} measured, '${manifest.stages[k]!.file}' in ${file}`
      : `${m.stages.length} stages measured, ${manifest.stages.length} in ${file}`;
    throw new OfframpError('data', `measured on other stage files than the folder given (${where}); run offramp measure on this folder again`, measuredFile);
  }
  return 'the manifest changed since the measurement (same stage files): the per-frame figures are those of the policy measured then';
}

/** The planned figures of a quantized chain's stage files, as cost plans them (int8 as stored). */
async function plannedStages(manifest: Manifest, file: string): Promise<StageFootprint[]> {
  const dir = path.dirname(file);
  const out: StageFootprint[] = [];
  for (const s of manifest.stages) {
    const sm = loadModel(path.join(dir, s.file));
    const [fp] = stageFootprints(sm, costModel(sm, { shapes: await completeShapes(sm, { batch: 1 }) }));
    // handover buffers between stages hold int8 values (one byte per float element), as the firmware keeps them
    const held = (ts: { dtype: string; bytes: number }[]) => BigInt(ts.reduce((a, t) => a + (t.dtype === 'float32' ? t.bytes / 4 : t.bytes), 0));
    const f = { ...fp.int8, handoverInBytes: held(s.inputs.filter((t) => t.from !== 'input')), handoverOutBytes: held(s.outputs.filter((t) => t.to.length)) };
    out.push({ ...fp, index: s.index, cut: s.cut.join('+'), stored: f, int8: f });
  }
  return out;
}

export async function costMeasured(where: string, o: MeasuredFlags): Promise<void> {
  for (const [set, name] of [[o.cuts, '--cuts'], [o.reorder, '--reorder'], [o.saveReordered, '--save-reordered'], [o.dim.length ? 1 : undefined, '--dim'], [o.int8, '--int8'], [o.float, '--float']] as const)
    if (set !== undefined && set !== false) throw usageError(`${name} does not apply with --measured: the measured folder's stage files are costed as written, in int8`);
  resolveTarget({ ...o, target: o.target ?? 'm4f' }); // a typo in a target option fails before any file is read
  const m = readMeasurement(o.measured);
  if (o.target !== undefined && Object.hasOwn(BUILTIN_TARGETS, o.target) && o.target !== m.core)
    throw usageError(`--target ${o.target}: ${o.measured} was measured on ${m.core}, whose instructions and cycles per instruction these are (give --target ${m.core}, or a profile file of your ${m.core} part)`);
  // The measured core's profile is the default, and the base the other target options override.
  if (o.target === undefined && !Object.hasOwn(BUILTIN_TARGETS, m.core)) throw new OfframpError('data', `core '${m.core}' has no built-in profile`, o.measured);
  const target = resolveTarget({ ...o, target: o.target ?? m.core })!;
  const chainFile = measuredChain(where);
  const { manifest, bytes } = readManifestFile(chainFile);
  refuseInputsAsOutputs([...splitReads(chainFile, manifest), { file: o.measured, role: 'measurement' }, { file: targetFile(o.target), role: 'target profile' }], [o.out]);
  verifyStageFiles(manifest, chainFile);
  const note = matchLine(m, manifest, bytes, chainFile, o.measured);

  const planned: Budget = checkBudget(await plannedStages(manifest, chainFile), target, 'stored');
  const exitStage = manifest.stages.flatMap((s) => s.exits.map(() => s.index));
  const mb = measuredBudget({
    core: m.core, machine: m.machine, cyclesPerInstruction: m.basis.cyclesPerInstruction, stages: m.stages, decisions: m.decisions, exitStage,
    flashLibraryBytes: m.flash.libraryBytes, ramLibraryBytes: m.ram.libraryBytes, stackPeakBytes: m.ram.stackPeakBytes,
    perFrame: { policy: m.perFrame.policy, full: m.perFrame.full, frames: m.frames },
  }, target, planned);

  const text = o.json
    ? toJson({ schema: COST_MEASURED_SCHEMA, chain: { manifest: chainFile, measurement: o.measured, ...(note && { note }) }, measured: mb, budget: planned }) + '\n'
    : measuredText(mb, planned, chainFile, o.measured, note, !!o.md);
  emit(text, o.out);
  if (!mb.fits) {
    const over = [!mb.flash.fits && `flash needs ${mb.flash.need} B of ${mb.flash.limit} B`, !mb.ram.fits && `RAM needs ${mb.ram.need} B of ${mb.ram.limit} B`].filter(Boolean).join(', ');
    throw new OverBudget(`over budget as measured on ${mb.core}: ${over}`);
  }
}

const HEAD = ['stage', 'file', 'MACs', 'instructions', 'per MAC', 'decision', 'cycles (est.)', 'latency', 'to exit', 'latency is'];

export function measuredText(mb: MeasuredBudget, planned: Budget, chain: string, measurement: string, note: string | undefined, md: boolean): string {
  const last = mb.stages[mb.stages.length - 1]!;
  const cells = mb.stages.map((s) => [String(s.index), s.file, si(s.macs), si(s.instructions), s.macs ? (s.instructions / s.macs).toFixed(2) : '-',
    s.decisionInstructions ? String(s.decisionInstructions) : '-', si(s.cycles), duration(s.latencyNs), duration(s.cumulativeNs), s.latencyBasis]);
  const margin = (f: { margin: bigint; marginPercent: number }) => `${f.margin >= 0n ? '+' : ''}${bytes(f.margin)} (${f.marginPercent >= 0 ? '+' : ''}${f.marginPercent.toFixed(2)}%)`;
  const mem = [
    ['flash', `${bytes(mb.flash.need)} (library: code, weights, tables)`, mb.flash.plannedBytes !== undefined ? `${bytes(mb.flash.plannedBytes)} (weights)` : '-', bytes(mb.flash.limit), margin(mb.flash), mb.flash.fits ? 'fits' : 'OVER'],
    ['RAM', `${bytes(mb.ram.need)} (library ${bytes(mb.ram.libraryBytes)} + stack peak ${bytes(mb.ram.stackPeakBytes)})`, mb.ram.plannedBytes !== undefined ? `${bytes(mb.ram.plannedBytes)} (arena + handover)` : '-', bytes(mb.ram.limit), margin(mb.ram), mb.ram.fits ? 'fits' : 'OVER'],
  ];
  const MEM_HEAD = ['', 'measured', 'planned', 'limit', 'margin (measured)', 'verdict'];
  const saved = mb.perFrame.fullInstructions ? (1 - mb.perFrame.policyInstructions / mb.perFrame.fullInstructions) * 100 : 0;
  const lines = [
    `measured on ${mb.core} (QEMU ${mb.machine}; ${measurement}): ${duration(last.cumulativeNs)} to the final output at ${mb.clockMhz} MHz, ${mb.fits ? 'flash and RAM fit' : 'OVER BUDGET'} on ${mb.target}`,
    `per frame with the policy: ${si(mb.perFrame.policyInstructions)} instructions, ${duration(mb.perFrame.policyNs)}, against ${duration(mb.perFrame.fullNs)} for the whole network (${saved.toFixed(1)} % saved; ${mb.perFrame.frames} frames measured)`,
    `latency is measured: instructions counted exactly on the emulated core, cycles at an estimated ${mb.cyclesPerInstruction} cycles per instruction (no wait states), time at ${mb.clockMhz} MHz`,
    ...(note ? [note] : []),
  ];
  if (md) {
    return ['### Measured budget', ...lines.map((l) => `- ${l}`), `- chain: ${chain}`, mdTable(HEAD, cells), mdTable(MEM_HEAD, mem), budgetMarkdown(planned, 'int8 as stored')].join('\n\n') + '\n';
  }
  return [lines.join('\n'), table(HEAD, cells), table(MEM_HEAD, mem), `planned (the stage files' figures, as cost projects them):\n\n${budgetText(planned, 'int8 as stored')}`].join('\n\n');
}

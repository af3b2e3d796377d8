// The budget from a measurement (offramp measure's figures for the same folder): latency per stage and
// to each exit from the firmware's executed instructions × the stated cycles-per-instruction estimate at
// the target's clock, flash and RAM from the ELF and the painted stack, each beside the planned figure.
// Plain exact arithmetic over the numbers given; reading and matching the files is the CLI's job.
import { OfframpError } from '../errors.js';
import { fit, nanosFor, type Budget, type Fit } from './budget.js';
import { parseRatio, type Target } from './target.js';

export interface MeasuredFigures {
  core: string;
  machine: string;
  /** the estimate the measurement states (QEMU counts instructions, not cycles) */
  cyclesPerInstruction: number;
  /** mean executed instructions of each stage (exit heads included) */
  stages: { index: number; file: string; macs: number; instructions: number }[];
  /** mean instructions of one decision at exit k */
  decisions: { exit: number; meanInstructions: number }[];
  /** the stage each exit belongs to, in exit order (from the manifest) */
  exitStage: number[];
  flashLibraryBytes: number;
  ramLibraryBytes: number;
  stackPeakBytes: number;
  /** mean instructions per frame with the policy measured, and through the whole network */
  perFrame: { policy: number; full: number; frames: number };
}

export interface MeasuredStage {
  index: number; file: string; macs: number;
  instructions: number;
  /** the decisions at this stage's exits, one each (mean instructions); 0 for the last stage */
  decisionInstructions: number;
  cycles: bigint; latencyNs: bigint;
  /** from the start of the frame to this stage's exit (or the final output): summed instructions, then cycles and time */
  cumulativeInstructions: number; cumulativeCycles: bigint; cumulativeNs: bigint;
  latencyBasis: 'measured';
}

export interface MeasuredBudget {
  core: string; machine: string; cyclesPerInstruction: number; clockMhz: number; target: string;
  basis: 'measured: instructions counted exactly on the emulated core; cycles = ceil(instructions × cyclesPerInstruction), an estimate (no wait states); time = cycles / clock';
  stages: MeasuredStage[];
  /** flash: the library's share of the ELF (code, weights, tables); planned: the stage files' weights */
  flash: Fit & { plannedBytes?: bigint };
  /** RAM: the library's data and bss plus the stack's high-water mark; planned: the largest stage's arena and handover buffers */
  ram: Fit & { libraryBytes: bigint; stackPeakBytes: bigint; plannedBytes?: bigint };
  perFrame: { frames: number; policyInstructions: number; fullInstructions: number; policyNs: bigint; fullNs: bigint };
  fits: boolean;
}

const bad = (what: string) => new OfframpError('usage', what);
const count = (x: unknown, what: string): number => {
  if (typeof x !== 'number' || !Number.isSafeInteger(x) || x < 0) throw bad(`${what}: ${JSON.stringify(x)} is not a count`);
  return x;
};

/** cycles = ceil(instructions × cpi), the cpi read as the decimal it prints as, so the arithmetic is exact. */
export function cyclesOfInstructions(instructions: number, cyclesPerInstruction: number): bigint {
  const cpi = parseRatio(String(cyclesPerInstruction));
  const n = BigInt(Math.round(instructions)) * cpi.num;
  return (n + cpi.den - 1n) / cpi.den;
}

/** The measured budget on `t` (its clock and limits); `planned` puts the budget's own flash and RAM beside. */
export function measuredBudget(m: MeasuredFigures, t: Target, planned?: Budget): MeasuredBudget {
  if (!m || !Array.isArray(m.stages) || !m.stages.length) throw bad('stages: the measured stages, at least one');
  if (!Array.isArray(m.decisions) || !Array.isArray(m.exitStage)) throw bad('decisions, exitStage: arrays (the measured decisions; the stage of each exit)');
  if (!t || typeof t.clockMhz?.num !== 'bigint' || typeof t.flashBytes !== 'bigint' || typeof t.ramBytes !== 'bigint') throw bad('target: a Target (resolveTarget)');
  if (!(m.cyclesPerInstruction > 0) || !/^\d+(\.\d+)?$/.test(String(m.cyclesPerInstruction))) throw bad(`cyclesPerInstruction: ${m.cyclesPerInstruction} is not a positive plain decimal`);
  const decision = new Map(m.decisions.map((d) => [d.exit, d.meanInstructions]));
  let cum = 0;
  const stages = m.stages.map((s, k): MeasuredStage => {
    const instructions = count(s.instructions, `stages[${k}].instructions`);
    const decisionInstructions = m.exitStage.reduce((a, st, e) => a + (st === s.index ? count(decision.get(e) ?? 0, `decisions[${e}]`) : 0), 0);
    const own = instructions + decisionInstructions;
    cum += own;
    const cycles = cyclesOfInstructions(own, m.cyclesPerInstruction), cumulativeCycles = cyclesOfInstructions(cum, m.cyclesPerInstruction);
    return {
      index: s.index, file: s.file, macs: s.macs, instructions, decisionInstructions, cycles, latencyNs: nanosFor(cycles, t.clockMhz),
      cumulativeInstructions: cum, cumulativeCycles, cumulativeNs: nanosFor(cumulativeCycles, t.clockMhz), latencyBasis: 'measured',
    };
  });
  const flashNeed = BigInt(count(m.flashLibraryBytes, 'flashLibraryBytes'));
  const lib = BigInt(count(m.ramLibraryBytes, 'ramLibraryBytes')), stack = BigInt(count(m.stackPeakBytes, 'stackPeakBytes'));
  const flash = { ...fit(flashNeed, t.flashBytes), ...(planned && { plannedBytes: planned.all[planned.gate].flash.need }) };
  const ram = { ...fit(lib + stack, t.ramBytes), libraryBytes: lib, stackPeakBytes: stack, ...(planned && { plannedBytes: planned.all[planned.gate].ram.need }) };
  const ns = (i: number) => nanosFor(cyclesOfInstructions(i, m.cyclesPerInstruction), t.clockMhz);
  return {
    core: m.core, machine: m.machine, cyclesPerInstruction: m.cyclesPerInstruction, clockMhz: Number(t.clockMhz.num) / Number(t.clockMhz.den), target: t.name ?? 'custom',
    basis: 'measured: instructions counted exactly on the emulated core; cycles = ceil(instructions × cyclesPerInstruction), an estimate (no wait states); time = cycles / clock',
    stages, flash, ram,
    perFrame: { frames: m.perFrame.frames, policyInstructions: m.perFrame.policy, fullInstructions: m.perFrame.full, policyNs: ns(m.perFrame.policy), fullNs: ns(m.perFrame.full) },
    fits: flash.fits && ram.fits,
  };
}

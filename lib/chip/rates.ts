// The MAC rates measured on the emulated cores (lib/chip/measured-rates.json, written by
// scripts/measure-rates.ts): what the built-in m4f, m7 and m55 profiles use. The file lives under
// lib/ as a real file, published with the package, and is read once when the profiles load.
import fs from 'node:fs';
import { OfframpError } from '../errors.js';
import { shippedPath } from '../util/shipped.js';

export const RATES_SCHEMA = 'offramp-rates/1';
export type RatedCore = 'm4f' | 'm7' | 'm55';

/** One network's int8 firmware on one core: every stage on every frame, exact counts. */
export interface NetworkRate { network: string; model: string; core: RatedCore; macs: number; instructions: number; instructionsPerMac: number }
export interface CoreRate {
  /** the estimate the cycles come from (lib/measure/device.ts's CYCLES_PER_INSTRUCTION when measured) */
  cyclesPerInstruction: number;
  int8: { instructionsPerMac: number; macsPerCycle: string; from: string };
  float32: { instructionsPerMac: number; macsPerCycle: string; from: string };
}
export interface MeasuredRates {
  schema: typeof RATES_SCHEMA;
  basis: string;
  int8: NetworkRate[];
  float32: { core: RatedCore; kernel: string; macs: number; instructions: number; instructionsPerMac: number }[];
  cores: Record<RatedCore, CoreRate>;
}

/**
 * 1 / (instructions per MAC × cycles per instruction) as a plain decimal of 4 significant digits,
 * rounded down, so the rate a profile carries never runs ahead of the measurement.
 */
export function macsPerCycleText(instructionsPerMac: number, cyclesPerInstruction: number): string {
  if (!(instructionsPerMac > 0) || !(cyclesPerInstruction > 0)) throw new OfframpError('usage', `instructionsPerMac and cyclesPerInstruction must be positive (${instructionsPerMac}, ${cyclesPerInstruction})`);
  const r = 1 / (instructionsPerMac * cyclesPerInstruction);
  const e = Math.floor(Math.log10(r)) - 3;
  const digits = Math.floor(r / 10 ** e + 1e-9);
  const s = e >= 0 ? String(digits * 10 ** e) : (digits / 10 ** -e).toFixed(-e);
  return s.includes('.') ? s.replace(/0+$/, '').replace(/\.$/, '') : s;
}

/** lib/chip/measured-rates.json, from lib/chip/ or dist/lib/chip/. */
export const ratesFile = (): string => shippedPath('chip/measured-rates.json', 'the measured MAC rates');

/** The measured rates, checked: every core with positive figures. */
export function readMeasuredRates(file = ratesFile()): MeasuredRates {
  let j: MeasuredRates;
  try { j = JSON.parse(fs.readFileSync(file, 'utf8')) as MeasuredRates; } catch (e) { throw new OfframpError('io', `cannot read the measured rates: ${(e as Error).message}`, file); }
  if (j?.schema !== RATES_SCHEMA) throw new OfframpError('data', `not a rates file of schema ${RATES_SCHEMA}`, file);
  for (const c of ['m4f', 'm7', 'm55'] as const) {
    const r = j.cores?.[c];
    if (!r || !(r.cyclesPerInstruction > 0) || !/^\d+(\.\d+)?$/.test(r.int8?.macsPerCycle ?? '') || !/^\d+(\.\d+)?$/.test(r.float32?.macsPerCycle ?? ''))
      throw new OfframpError('data', `core ${c}: missing or malformed rates`, file);
  }
  return j;
}

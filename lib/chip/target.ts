// The chip a model must fit: flash, RAM, clock and arithmetic throughput, from
// command-line options, a JSON profile file or a built-in profile by core class.
import fs from 'node:fs';
import { OfframpError } from '../errors.js';
import { readRegular } from '../util/fsx.js';
import { parseJsonText } from '../util/json.js';
import { readMeasuredRates, type RatedCore } from './rates.js';

/** A decimal number held exactly: value = num / den. */
export interface Ratio { num: bigint; den: bigint }

export interface Target {
  name?: string;
  flashBytes: bigint;
  ramBytes: bigint;
  clockMhz: Ratio;
  /** MACs per cycle on the stored (usually float32) weights */
  macsPerCycle: Ratio;
  /** MACs per cycle for the int8 projection (kernels with packed 8-bit arithmetic); defaults to macsPerCycle */
  int8MacsPerCycle: Ratio;
  /** some figures are typical values, from memory or estimated (the built-in profiles: flash, RAM, clock; the cycles per instruction) */
  rough?: boolean;
  note?: string;
  /** where each MAC rate comes from: measured on the emulated core (lib/chip/measured-rates.json), or not (from memory, or the user's figure); absent: neither is measured */
  rateBasis?: { float: RateBasis; int8: RateBasis };
}
export type RateBasis = 'measured' | 'from memory';

export interface TargetOptions {
  target?: string; flash?: string; ram?: string; clockMhz?: string; macsPerCycle?: string; int8MacsPerCycle?: string;
}

const bad = (msg: string, file?: string, where?: string) => new OfframpError('usage', msg, file, where);

/**
 * Byte sizes: "262144", "0x40000", "256K", "256KiB", "1.5M", "2MiB". K, KB and KiB all mean 1024, M, MB and MiB
 * 1024²: microcontroller datasheets and linker scripts write "256 KB" for 262144 bytes, so a figure copied from
 * one must not come out 2.4% short. Decimals are allowed when the result is a whole number of bytes.
 */
export function parseBytes(s: string, what = 'size', file?: string): bigint {
  const t = s.trim();
  if (/^0x[0-9a-f]+$/i.test(t)) return positive(BigInt(t), what, s, file);
  const m = /^(\d+(?:\.\d+)?)\s*(|k|kb|kib|m|mb|mib|g|gb|gib)$/i.exec(t);
  if (!m) throw bad(`${what} '${s}' is not a byte size (a whole number, optionally with K, KiB, M or MiB; K = 1024)`, file);
  const unit = m[2].toLowerCase()[0] ?? '';
  const scale = unit === 'k' ? 1024n : unit === 'm' ? 1024n ** 2n : unit === 'g' ? 1024n ** 3n : 1n;
  const r = parseRatio(m[1]);
  if ((r.num * scale) % r.den) throw bad(`${what} '${s}' is not a whole number of bytes`, file);
  return positive((r.num * scale) / r.den, what, s, file);
}

function positive(v: bigint, what: string, s: string, file?: string): bigint {
  if (v <= 0n) throw bad(`${what} '${s}' must be more than 0 bytes`, file);
  return v;
}

/** "64", "0.5", "1e3" is not accepted: plain decimals only, so the value is exact. */
export function parseRatio(s: string): Ratio {
  const m = /^(\d+)(?:\.(\d+))?$/.exec(s.trim());
  if (!m) throw bad(`'${s}' is not a plain decimal number`);
  const frac = m[2] ?? '';
  const den = 10n ** BigInt(frac.length);
  const num = BigInt(m[1] + frac);
  const g = gcd(num, den);
  return { num: num / g, den: den / g };
}
const gcd = (a: bigint, b: bigint): bigint => (b ? gcd(b, a % b) : a || 1n);

function parseRate(s: string, what: string, file?: string): Ratio {
  let r: Ratio;
  try { r = parseRatio(s); } catch { throw bad(`${what} '${s}' is not a plain decimal number`, file); }
  if (r.num <= 0n) throw bad(`${what} '${s}' must be more than 0`, file);
  return r;
}

export function ratioText(r: Ratio): string {
  if (r.den === 1n) return String(r.num);
  // Parsed decimals reduce to a denominator dividing a power of ten, so this prints them exactly.
  let d = 0, p = 1n;
  while (p % r.den && d < 40) { d++; p *= 10n; }
  if (p % r.den) return String(Number(r.num) / Number(r.den));
  const s = ((r.num * p) / r.den).toString().padStart(d + 1, '0');
  return `${s.slice(0, -d)}.${s.slice(-d)}`.replace(/0+$/, '').replace(/\.$/, '');
}

/*
 * Built-in profiles by core class: a typical part of each class, not any product. Flash, RAM and clock are
 * ROUGH FIGURES, FROM MEMORY. The MAC rates of m4f, m7 and m55 are measured (lib/chip/measured-rates.json,
 * scripts/measure-rates.ts): instructions per MAC counted exactly on the emulated core, int8 with the
 * project's own firmware kernels on whole networks, float32 with a plain C convolution (the firmware has no
 * float kernels), turned into MACs per cycle with an estimated cycles-per-instruction figure. QEMU has no
 * Cortex-M0+ machine, so m0plus keeps rates from memory (float32 in software: tens of cycles per MAC).
 * Give your part's figures with --flash/--ram/--clock-mhz/--macs-per-cycle or a profile file.
 */
/** The rates the profiles carried before they were measured (float32, int8 MAC/cycle), from memory; m0plus still uses its own. */
export const FROM_MEMORY_RATES: Readonly<Record<string, { float: string; int8: string }>> = {
  m0plus: { float: '0.02', int8: '0.25' }, m4f: { float: '0.5', int8: '1' }, m7: { float: '1', int8: '2' }, m55: { float: '2', int8: '8' },
};
const CLASS: Record<string, [flash: string, ram: string, mhz: string, what: string]> = {
  m0plus: ['256KiB', '32KiB', '48', 'M0+ class, no FPU: software float32'],
  m4f: ['1MiB', '256KiB', '80', 'M4 class with FPU and DSP extension'],
  m7: ['2MiB', '512KiB', '400', 'M7 class, dual issue, FPU'],
  m55: ['2MiB', '1MiB', '200', 'M55 class with the M-profile vector extension'],
};
function profile(name: string): Target {
  const [flash, ram, mhz, what] = CLASS[name];
  const base = { name, flashBytes: parseBytes(flash), ramBytes: parseBytes(ram), clockMhz: parseRatio(mhz), rough: true };
  if (name === 'm0plus') {
    const m = FROM_MEMORY_RATES.m0plus;
    return { ...base, macsPerCycle: parseRatio(m.float), int8MacsPerCycle: parseRatio(m.int8), rateBasis: { float: 'from memory', int8: 'from memory' },
      note: `${what}; QEMU has no Cortex-M0+ machine, so every figure is from memory, MAC rates included` };
  }
  const r = readMeasuredRates().cores[name as RatedCore];
  return {
    ...base, macsPerCycle: parseRatio(r.float32.macsPerCycle), int8MacsPerCycle: parseRatio(r.int8.macsPerCycle), rateBasis: { float: 'measured', int8: 'measured' },
    note: `${what}; MAC rates measured on the emulated core (int8 ${r.int8.instructionsPerMac} instructions per MAC, the project's firmware on ${r.int8.from}; `
      + `float32 ${r.float32.instructionsPerMac}, a plain C convolution: the firmware has no float kernels) at an estimated ${r.cyclesPerInstruction} cycles per instruction; flash, RAM and clock a typical part's, from memory`,
  };
}
/** The built-in chip profiles by name, marked `rough`: flash, RAM and clock from memory; rates measured except m0plus's (`rateBasis`). */
export const BUILTIN_TARGETS: Record<string, Target> = Object.fromEntries(Object.keys(CLASS).map((n) => [n, profile(n)]));

const FIELDS = ['name', 'flashBytes', 'ramBytes', 'clockMhz', 'macsPerCycle', 'int8MacsPerCycle', 'rough', 'note'] as const;

/** A profile file: a JSON object with flashBytes, ramBytes (numbers or size strings), clockMhz, macsPerCycle. */
export function readTargetFile(file: string): Target {
  const j = parseJsonText(readRegular(file, 'target profile').toString('utf8'), 'a target profile object');
  if (!j.ok) throw new OfframpError('data', j.message, file);
  return targetFromJson(j.value, file);
}

export function targetFromJson(j: unknown, file?: string): Target {
  const fail = (msg: string, where?: string) => new OfframpError('data', msg, file, where);
  if (!j || typeof j !== 'object' || Array.isArray(j)) throw fail('a target profile is a JSON object');
  const o = j as Record<string, unknown>;
  for (const k of Object.keys(o)) if (!(FIELDS as readonly string[]).includes(k) && !k.startsWith('$')) throw fail(`unknown field '${k}' (fields: ${FIELDS.join(', ')})`);
  const size = (k: 'flashBytes' | 'ramBytes'): bigint => {
    const v = o[k];
    if (v === undefined) throw fail(`field '${k}' is missing`);
    if (typeof v === 'number' && !Number.isSafeInteger(v)) throw fail(`'${k}' must be a whole number of bytes, not ${v}`, k);
    if (typeof v !== 'number' && typeof v !== 'string') throw fail(`'${k}' must be a number or a size string such as "256KiB"`, k);
    try { return parseBytes(String(v), k); } catch (e) { throw fail((e as OfframpError).message, k); }
  };
  const rate = (k: 'clockMhz' | 'macsPerCycle' | 'int8MacsPerCycle'): Ratio | undefined => {
    const v = o[k];
    if (v === undefined) return undefined;
    if (typeof v !== 'number' && typeof v !== 'string') throw fail(`'${k}' must be a number`, k);
    try { return parseRate(String(v), k); } catch (e) { throw fail((e as OfframpError).message, k); }
  };
  const need = <T>(v: T | undefined, k: string): T => { if (v === undefined) throw fail(`field '${k}' is missing`); return v; };
  if (o.name !== undefined && typeof o.name !== 'string') throw fail(`'name' must be a string`, 'name');
  if (o.note !== undefined && typeof o.note !== 'string') throw fail(`'note' must be a string`, 'note');
  if (o.rough !== undefined && typeof o.rough !== 'boolean') throw fail(`'rough' must be true or false`, 'rough');
  const macsPerCycle = need(rate('macsPerCycle'), 'macsPerCycle');
  return {
    ...(o.name !== undefined && { name: o.name as string }),
    flashBytes: size('flashBytes'), ramBytes: size('ramBytes'), clockMhz: need(rate('clockMhz'), 'clockMhz'),
    macsPerCycle, int8MacsPerCycle: rate('int8MacsPerCycle') ?? macsPerCycle,
    ...(o.rough !== undefined && { rough: o.rough as boolean }), ...(o.note !== undefined && { note: o.note as string }),
  };
}

/**
 * The target from options: a profile (built-in name or file) if given, then each option overrides its figure.
 * Undefined when no target figure is given at all. Without a profile, all four figures are needed.
 */
export function resolveTarget(o: TargetOptions): Target | undefined {
  const any = o.target ?? o.flash ?? o.ram ?? o.clockMhz ?? o.macsPerCycle ?? o.int8MacsPerCycle;
  if (any === undefined) return undefined;
  let base: Partial<Target> = {};
  if (o.target !== undefined) {
    const b = BUILTIN_TARGETS[o.target];
    base = b ? { ...b } : fs.existsSync(o.target) || /[./\\]/.test(o.target) ? readTargetFile(o.target)
      : (() => { throw bad(`--target '${o.target}' is neither a profile file nor a built-in profile (${Object.keys(BUILTIN_TARGETS).join(', ')})`); })();
  }
  const t: Partial<Target> = { ...base };
  if (o.flash !== undefined) t.flashBytes = parseBytes(o.flash, '--flash');
  if (o.ram !== undefined) t.ramBytes = parseBytes(o.ram, '--ram');
  if (o.clockMhz !== undefined) t.clockMhz = parseRate(o.clockMhz, '--clock-mhz');
  if (o.macsPerCycle !== undefined) t.macsPerCycle = parseRate(o.macsPerCycle, '--macs-per-cycle');
  if (o.int8MacsPerCycle !== undefined) t.int8MacsPerCycle = parseRate(o.int8MacsPerCycle, '--int8-macs-per-cycle');
  const missing = ([['flashBytes', '--flash'], ['ramBytes', '--ram'], ['clockMhz', '--clock-mhz'], ['macsPerCycle', '--macs-per-cycle']] as const)
    .filter(([k]) => t[k] === undefined).map(([, opt]) => opt);
  if (missing.length) throw bad(`a target needs ${missing.join(', ')} (or --target FILE|${Object.keys(BUILTIN_TARGETS).join('|')})`);
  // Overriding a figure of a built-in profile leaves the rest rough; the mark stays. A rate given replaces a measured one.
  const basis = t.rateBasis && {
    float: o.macsPerCycle !== undefined ? 'from memory' as const : t.rateBasis.float,
    int8: o.int8MacsPerCycle !== undefined || (o.macsPerCycle !== undefined && t.int8MacsPerCycle === undefined) ? 'from memory' as const : t.rateBasis.int8,
  };
  return { ...t, int8MacsPerCycle: t.int8MacsPerCycle ?? t.macsPerCycle, ...(basis && { rateBasis: basis }) } as Target;
}

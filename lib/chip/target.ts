// The chip a model must fit: flash, RAM, clock and arithmetic throughput, from
// command-line options, a JSON profile file or a built-in profile by core class.
import fs from 'node:fs';
import { OfframpError } from '../errors.js';
import { readRegular } from '../util/fsx.js';
import { parseJsonText } from '../util/json.js';

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
  /** figures are rough, from memory (the built-in profiles) */
  rough?: boolean;
  note?: string;
}

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
 * Built-in profiles by core class. ROUGH FIGURES, FROM MEMORY: a typical part of each class, not any product.
 * Throughput counts whole MACs including operand loads in a plain kernel, not the core's peak issue rate:
 * float32 on a core without FPU goes through software floating point (tens of cycles per MAC); int8 uses the
 * 32-bit multiplier, dual 16-bit MAC instructions (DSP extension) or 128-bit vectors (M-profile vector extension).
 * Give your part's figures with --flash/--ram/--clock-mhz/--macs-per-cycle or a profile file.
 */
const P = (name: string, flash: string, ram: string, mhz: string, r: string, r8: string, note: string): Target => ({
  name, flashBytes: parseBytes(flash), ramBytes: parseBytes(ram), clockMhz: parseRatio(mhz),
  macsPerCycle: parseRatio(r), int8MacsPerCycle: parseRatio(r8), rough: true, note,
});
/** The built-in chip profiles by name: rough figures from memory, marked `rough`. */
export const BUILTIN_TARGETS: Record<string, Target> = {
  // Cortex-M0+ class: no FPU, no DSP; float32 in software.
  m0plus: P('m0plus', '256KiB', '32KiB', '48', '0.02', '0.25', 'M0+ class, no FPU: software float32'),
  // Cortex-M4 with single-precision FPU: fused MAC plus loads; int8 via dual 16-bit MACs.
  m4f: P('m4f', '1MiB', '256KiB', '80', '0.5', '1', 'M4 class with FPU and DSP extension'),
  // Cortex-M7: dual issue, caches/TCM; roughly twice the M4 per cycle.
  m7: P('m7', '2MiB', '512KiB', '400', '1', '2', 'M7 class, dual issue, FPU'),
  // Cortex-M55 with the M-profile vector extension: 128-bit beats, 4 float32 or 16 int8 lanes, half-rate in practice.
  m55: P('m55', '2MiB', '1MiB', '200', '2', '8', 'M55 class with the M-profile vector extension'),
};

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
  // Overriding a figure of a built-in profile leaves the rest rough; the mark stays.
  return { ...t, int8MacsPerCycle: t.int8MacsPerCycle ?? t.macsPerCycle } as Target;
}

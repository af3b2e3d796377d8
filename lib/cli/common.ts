// What every command shares: error reporting, exit codes, option parsing.
import { OfframpError, usageError } from '../errors.js';
import { writeAtomic } from '../util/atomic.js';
import { fsError, isFsError } from '../util/fsx.js';

export const EXIT = { ok: 0, input: 1, usage: 2, budget: 3 } as const;

/** Largest value of a bound dim or batch: a shape past it would not fit any microcontroller, nor exact arithmetic. */
export const MAX_DIM = 2 ** 31 - 1;

export interface NumberRange {
  /** whole numbers only */
  int?: boolean;
  min?: number; max?: number;
  /** min itself is not allowed */
  above?: boolean;
  /** max itself is not allowed */
  below?: boolean;
  /** why the range is what it is, said with the refusal */
  why?: string;
}

/** --confidence: below even odds a promise says nothing; 1 itself no finite data can certify. */
export const CONFIDENCE_RANGE: NumberRange = { min: 0.5, max: 1, below: true, why: 'a promise held with less than even odds promises nothing, and no finite data certifies 1' };
/** --held-out: both parts, the searching and the certifying one, need rows of their own. */
export const HELD_OUT_RANGE: NumberRange = { min: 0.05, max: 0.95, why: 'the search and the certification each need at least a twentieth of the rows' };

const DECIMAL = /^[+-]?(\d+\.?\d*|\.\d+)(e[+-]?\d+)?$/i;

/**
 * Every numeric option goes through here: a decimal number (no empty string, no hex, no 'Infinity'), whole if asked,
 * inside its range, else a usage error (exit 2) naming the option, the range and the value given.
 */
export function parseNumber(v: string | undefined, option: string, r: NumberRange = {}): number {
  const s = (v ?? '').trim();
  const x = DECIMAL.test(s) ? Number(s) : NaN;
  const ok = Number.isFinite(x) && (!r.int || Number.isSafeInteger(x))
    && (r.min === undefined || (r.above ? x > r.min : x >= r.min))
    && (r.max === undefined || (r.below ? x < r.max : x <= r.max));
  if (ok) return x;
  const lo = r.min === undefined ? '' : `${r.above ? 'above' : 'from'} ${r.min}`;
  const hi = r.max === undefined ? '' : `${r.below ? 'below' : 'up to'} ${r.max}`;
  const range = [lo, hi].filter(Boolean).join(' ');
  throw usageError(`${option} takes ${r.int ? 'a whole number' : 'a number'}${range ? ` ${range}` : ''}, not '${v ?? ''}'${r.why ? `: ${r.why}` : ''}`);
}

/** --batch: the value of a symbolic leading input dim. */
export const parseBatch = (v: string | undefined) => parseNumber(v, '--batch', { int: true, min: 1, max: MAX_DIM });

export function parseDims(list: string[] = []): Record<string, number> {
  const out: Record<string, number> = {};
  for (const item of list) for (const kv of item.split(',')) {
    const m = /^([^=]+)=(.*)$/.exec(kv.trim());
    if (!m || !m[1].trim()) throw usageError(`--dim takes NAME=VALUE (a whole number), not '${kv}'`);
    out[m[1].trim()] = parseNumber(m[2], `--dim ${m[1].trim()}`, { int: true, min: 1, max: MAX_DIM });
  }
  return out;
}

/** A comma-separated list of names given to `option`: at least one, and no empty entries (`a,,b`, `,`). */
export function nameList(v: string, option: string): string[] {
  const items = v.split(',').map((s) => s.trim());
  if (!items.length || items.some((s) => !s)) throw usageError(`${option} takes a comma-separated list with no empty entries, not '${v}'`);
  return items;
}

/** `--at` shares of the MACs: 0.25 or 25%, strictly between 0 and 1. */
export function parseFractions(v: string): number[] {
  return nameList(v, '--at').map((s) => {
    const m = /^(\d+(?:\.\d+)?)(%?)$/.exec(s);
    const f = m ? Number(m[1]) / (m[2] ? 100 : 1) : NaN;
    if (!(f > 0 && f < 1)) throw usageError(`--at takes MAC shares between 0 and 1 (0.25 or 25%), not '${s}'`);
    return f;
  });
}

export const collect = (v: string, prev: string[] = []) => [...prev, v];
export const splitList = (v?: string): string[] => (v ? v.split(',').map((s) => s.trim()).filter(Boolean) : []);

/** Run `f`; an OfframpError from it that names no file (usage errors aside) gets `file`: the input it is about. */
export function inFile<T>(file: string, f: () => T): T {
  const fix = (e: unknown) => (e instanceof OfframpError && !e.file && e.kind !== 'usage' ? Object.assign(new OfframpError(e.kind, e.message, file, e.where), { stack: e.stack }) : e);
  let r: T;
  try { r = f(); } catch (e) { throw fix(e); }
  if (r instanceof Promise) return r.catch((e) => { throw fix(e); }) as T;
  return r;
}

/** A command action whose first argument is a model: errors of the analysis (a node, a dim) name that file. */
export const modelAction = <A extends unknown[]>(f: (file: string, ...rest: A) => Promise<void> | void) =>
  (file: string, ...rest: A) => inFile(file, () => f(file, ...rest));

/** Print to stdout, or write atomically to a file. */
export function emit(text: string, file?: string): void {
  if (file) writeAtomic(file, text);
  else process.stdout.write(text);
}

/** Thrown after the report is out when a stage is over its budget: one line on stderr, exit 3. */
export class OverBudget extends Error {}

export function fail(e: unknown, debug: boolean): number {
  if (e instanceof OverBudget) {
    process.stderr.write(`offramp: ${e.message}\n`);
    return EXIT.budget;
  }
  if (e instanceof OfframpError) {
    process.stderr.write(`offramp: ${e.line()}\n`);
    if (debug) process.stderr.write(`${e.stack}\n`);
    return e.kind === 'usage' ? EXIT.usage : EXIT.input;
  }
  // A file-system failure the readers did not wrap still names its path, in one line.
  if (isFsError(e)) {
    const err = fsError(e);
    process.stderr.write(`offramp: ${err.line()}\n`);
    if (debug) process.stderr.write(`${(e as Error).stack}\n`);
    return EXIT.input;
  }
  process.stderr.write(`offramp: internal error: ${(e as Error)?.message ?? e}\n`);
  if (debug) process.stderr.write(`${(e as Error)?.stack}\n`);
  else process.stderr.write('offramp: run again with --debug for details\n');
  return EXIT.input;
}

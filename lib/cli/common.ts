// What every command shares: error reporting, exit codes, option parsing.
import { OfframpError, usageError } from '../errors.js';
import { writeAtomic } from '../util/atomic.js';

export const EXIT = { ok: 0, input: 1, usage: 2, budget: 3 } as const;

export function parseDims(list: string[] = []): Record<string, number> {
  const out: Record<string, number> = {};
  for (const item of list) for (const kv of item.split(',')) {
    const m = /^([^=]+)=(\d+)$/.exec(kv.trim());
    if (!m) throw usageError(`--dim takes NAME=VALUE (a whole number), not '${kv}'`);
    out[m[1]] = Number(m[2]);
  }
  return out;
}

/** `--at` shares of the MACs: 0.25 or 25%, strictly between 0 and 1. */
export function parseFractions(v: string): number[] {
  return splitList(v).map((s) => {
    const m = /^(\d+(?:\.\d+)?)(%?)$/.exec(s);
    const f = m ? Number(m[1]) / (m[2] ? 100 : 1) : NaN;
    if (!(f > 0 && f < 1)) throw usageError(`--at takes MAC shares between 0 and 1 (0.25 or 25%), not '${s}'`);
    return f;
  });
}

export const collect = (v: string, prev: string[] = []) => [...prev, v];
export const splitList = (v?: string): string[] => (v ? v.split(',').map((s) => s.trim()).filter(Boolean) : []);

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
  process.stderr.write(`offramp: internal error: ${(e as Error)?.message ?? e}\n`);
  if (debug) process.stderr.write(`${(e as Error)?.stack}\n`);
  else process.stderr.write('offramp: run again with --debug for details\n');
  return EXIT.input;
}

// Human units for reports and exact JSON numbers for scripts.

// SI and binary prefixes up to the largest defined; past the largest, the exact integer.
const SI: [number, string][] = [[1e3, 'K'], [1e6, 'M'], [1e9, 'G'], [1e12, 'T'], [1e15, 'P'], [1e18, 'E'], [1e21, 'Z'], [1e24, 'Y'], [1e27, 'R'], [1e30, 'Q']];
const BIN: [number, string][] = [[2 ** 10, 'KiB'], [2 ** 20, 'MiB'], [2 ** 30, 'GiB'], [2 ** 40, 'TiB'], [2 ** 50, 'PiB'], [2 ** 60, 'EiB'], [2 ** 70, 'ZiB'], [2 ** 80, 'YiB']];

/** The integer itself, in full: exact for a bigint, the double's exact value for a number. */
const integer = (v: bigint | number) => (typeof v === 'bigint' ? v.toString() : BigInt(Math.round(v)).toString());

/**
 * `x` in the largest unit it reaches, rounded by `round`; a value that rounds up to the next
 * unit's size (999 999 → "1000 K") moves up to it. `undefined` past the largest unit.
 * `units`: ascending, each the previous times the first.
 */
export function scaled(x: number, units: [number, string][], round: (v: number) => string): string | undefined {
  let i = units.length - 1;
  while (i >= 0 && Math.abs(x) < units[i][0]) i--;
  for (; i < units.length; i++) {
    const r = round(i < 0 ? x : x / units[i][0]);
    const k = i < 0 ? 1 : units[i][0], next = units[i + 1]?.[0] ?? k * units[0][0];
    if (Math.abs(Number(r)) * k < next) return i < 0 ? r : `${r} ${units[i][1]}`;
  }
  return undefined;
}

/** 1234567n → "1.23 M" (SI, for counts such as MACs and params); past 999 Q the exact integer. */
export function si(v: bigint | number, digits = 3): string {
  const x = Number(v);
  if (Math.abs(x) < 1e3) return String(x);
  return scaled(x, SI, (y) => fixed(y, digits)) ?? integer(v);
}

/** Bytes in binary units: 1536n → "1.50 KiB"; past 1023.99 YiB the exact integer of bytes. */
export function bytes(v: bigint | number): string {
  const x = Number(v);
  if (Math.abs(x) < 2 ** 10) return `${x} B`;
  return scaled(x, BIN, (y) => y.toFixed(2)) ?? `${integer(v)} B`;
}

/** An estimated time given in microseconds: µs below a millisecond, ms with two decimals above. */
export const microseconds = (us: number): string => (us >= 1000 ? `${(us / 1000).toFixed(2)} ms` : `${us} µs`);

/** `digits` significant digits without exponent notation (500 stays 500, not 5.0e+2). */
const fixed = (v: number, digits: number) => { const p = v.toPrecision(digits); return p.includes('e') ? String(Math.round(v)) : trim(p); };
const trim = (s: string) => (s.includes('.') && !s.includes('e') ? s.replace(/\.?0+$/, '') : s);

export { toJson } from '../util/json.js';

/** Aligned text table; numeric-looking columns align right. */
export function table(head: string[], rows: string[][]): string {
  const w = head.map((h, i) => Math.max(h.length, ...rows.map((r) => (r[i] ?? '').length)));
  const right = head.map((_, i) => rows.some((r) => /\d/.test(r[i] ?? '')) && rows.every((r) => /^[-\d.,%]+( [A-Za-z]+)?$|^$|^-$/.test(r[i] ?? '')));
  const fmt = (r: string[]) => r.map((c, i) => (right[i] ? (c ?? '').padStart(w[i]) : (c ?? '').padEnd(w[i]))).join('  ').trimEnd();
  return [fmt(head), w.map((x) => '─'.repeat(x)).join('  '), ...rows.map(fmt)].join('\n');
}

/** Markdown table. */
export function mdTable(head: string[], rows: string[][]): string {
  const esc = (s: string) => s.replace(/\|/g, '\\|');
  return [`| ${head.map(esc).join(' | ')} |`, `| ${head.map(() => '---').join(' | ')} |`, ...rows.map((r) => `| ${r.map(esc).join(' | ')} |`)].join('\n');
}

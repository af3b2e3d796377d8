// Human units for reports and exact JSON numbers for scripts.

/** 1234567n → "1.23 M" (SI, for counts such as MACs and params). */
export function si(v: bigint | number, digits = 3): string {
  const x = Number(v);
  const units: [number, string][] = [[1e12, 'T'], [1e9, 'G'], [1e6, 'M'], [1e3, 'K']];
  for (const [k, u] of units) if (Math.abs(x) >= k) return `${fixed(x / k, digits)} ${u}`;
  return String(x);
}

/** Bytes in binary units: 1536n → "1.50 KiB". */
export function bytes(v: bigint | number): string {
  const x = Number(v);
  const units: [number, string][] = [[2 ** 40, 'TiB'], [2 ** 30, 'GiB'], [2 ** 20, 'MiB'], [2 ** 10, 'KiB']];
  for (const [k, u] of units) if (Math.abs(x) >= k) return `${(x / k).toFixed(2)} ${u}`;
  return `${x} B`;
}

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

// Inline SVG charts for the self-contained HTML reports: no scripts, no external files.

export const COLORS = ['#1f77b4', '#d62728', '#2ca02c', '#9467bd', '#ff7f0e', '#8c564b', '#17becf'];
export const esc = (s: string) => s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;');
const f = (x: number) => (Math.round(x * 10) / 10).toString();

/** "Nice" ticks over [lo, hi]. */
function ticks(lo: number, hi: number, n = 5): number[] {
  if (!(hi > lo)) return [lo];
  const step0 = (hi - lo) / n, mag = 10 ** Math.floor(Math.log10(step0));
  const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => s >= step0) ?? step0;
  const out: number[] = [];
  for (let v = Math.ceil(lo / step) * step; v <= hi + step * 1e-9; v += step) out.push(Number(v.toPrecision(12)));
  return out;
}

export interface Series { name: string; color: string; pts: [number, number][]; marks?: [number, number, string][]; /** false: points only, no line through them */ line?: boolean }

export function lineChart(title: string, xl: string, yl: string, series: Series[], xFmt: (v: number) => string, yFmt: (v: number) => string): string {
  const W = 640, H = 360, L = 70, R = 150, T = 30, B = 50;
  const all = series.flatMap((s) => [...s.pts, ...(s.marks ?? []).map(([x, y]) => [x, y] as [number, number])]);
  const xs = all.map((p) => p[0]), ys = all.map((p) => p[1]);
  const x0 = 0, x1 = Math.max(...xs, 1) * 1.05;
  let y0 = Math.min(...ys), y1 = Math.max(...ys);
  const pad = Math.max((y1 - y0) * 0.08, 0.005);
  y0 -= pad; y1 += pad;
  const X = (v: number) => L + ((v - x0) / (x1 - x0)) * (W - L - R), Y = (v: number) => H - B - ((v - y0) / (y1 - y0)) * (H - T - B);
  const parts: string[] = [`<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 ${W} ${H}" width="${W}" height="${H}" font-family="sans-serif" font-size="11">`,
    `<text x="${W / 2}" y="18" text-anchor="middle" font-size="13">${esc(title)}</text>`,
    `<line x1="${L}" y1="${H - B}" x2="${W - R}" y2="${H - B}" stroke="#333"/><line x1="${L}" y1="${T}" x2="${L}" y2="${H - B}" stroke="#333"/>`];
  for (const v of ticks(x0, x1)) parts.push(`<line x1="${f(X(v))}" y1="${H - B}" x2="${f(X(v))}" y2="${H - B + 4}" stroke="#333"/><text x="${f(X(v))}" y="${H - B + 16}" text-anchor="middle">${esc(xFmt(v))}</text>`);
  for (const v of ticks(y0, y1)) parts.push(`<line x1="${L - 4}" y1="${f(Y(v))}" x2="${W - R}" y2="${f(Y(v))}" stroke="#ddd"/><text x="${L - 6}" y="${f(Y(v) + 4)}" text-anchor="end">${esc(yFmt(v))}</text>`);
  parts.push(`<text x="${(L + W - R) / 2}" y="${H - 12}" text-anchor="middle">${esc(xl)}</text><text transform="translate(16 ${(T + H - B) / 2}) rotate(-90)" text-anchor="middle">${esc(yl)}</text>`);
  series.forEach((s, i) => {
    if (s.pts.length && s.line !== false) parts.push(`<polyline fill="none" stroke="${s.color}" stroke-width="1.5" points="${s.pts.map(([x, y]) => `${f(X(x))},${f(Y(y))}`).join(' ')}"/>`);
    for (const [x, y] of s.pts) parts.push(`<circle cx="${f(X(x))}" cy="${f(Y(y))}" r="2" fill="${s.color}"/>`);
    for (const [x, y, label] of s.marks ?? []) parts.push(`<circle cx="${f(X(x))}" cy="${f(Y(y))}" r="5" fill="none" stroke="${s.color}" stroke-width="2"><title>${esc(label)}</title></circle>`);
    parts.push(`<rect x="${W - R + 12}" y="${T + i * 18}" width="10" height="10" fill="${s.color}"/><text x="${W - R + 27}" y="${T + i * 18 + 9}">${esc(s.name)}</text>`);
  });
  parts.push('</svg>');
  return parts.join('\n');
}

export function barChart(title: string, labels: string[], values: number[], fmt: (v: number) => string, color: string): string {
  const W = 640, H = 300, L = 70, R = 20, T = 30, B = 60;
  const max = Math.max(...values, 1e-12);
  const bw = (W - L - R) / Math.max(values.length, 1);
  const parts: string[] = [`<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 ${W} ${H}" width="${W}" height="${H}" font-family="sans-serif" font-size="11">`,
    `<text x="${W / 2}" y="18" text-anchor="middle" font-size="13">${esc(title)}</text>`,
    `<line x1="${L}" y1="${H - B}" x2="${W - R}" y2="${H - B}" stroke="#333"/>`];
  values.forEach((v, i) => {
    const h = (v / max) * (H - T - B - 16), x = L + i * bw + bw * 0.15; // room for the value label under the title
    parts.push(`<rect x="${f(x)}" y="${f(H - B - h)}" width="${f(bw * 0.7)}" height="${f(h)}" fill="${color}"><title>${esc(`${labels[i]}: ${fmt(v)}`)}</title></rect>`,
      `<text x="${f(x + bw * 0.35)}" y="${f(H - B - h - 4)}" text-anchor="middle">${esc(fmt(v))}</text>`,
      `<text x="${f(x + bw * 0.35)}" y="${H - B + 16}" text-anchor="middle">${esc(labels[i])}</text>`);
  });
  parts.push('</svg>');
  return parts.join('\n');
}


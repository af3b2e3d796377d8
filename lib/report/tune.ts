// Renderings of a tuning run: text tables, JSON (schema offramp-tune/1) and a
// self-contained HTML page with inline SVG charts. No timestamps or timings, so
// the same run renders to the same bytes.
import { COLORS, esc, lineChart, barChart, type Series } from './svg.js';
import type { Eval, Point, TuneResult } from '../tune/search.js';
import type { Policy } from '../policy/policy.js';
import { si, table, toJson } from './units.js';

export const TUNE_SCHEMA = 'offramp-tune/1';

export interface TuneReport {
  result: TuneResult<Policy>;
  /** exit names, the final output last */
  exitNames: string[];
  stages: { index: number; macs: number; exits: string[] }[];
  data: string;
  stream: boolean;
  written?: string;
}

const pct = (x: number, d = 2) => `${(x * 100).toFixed(d)} %`;
const drop = (full: Eval, e: Eval) => ((full.accuracy - e.accuracy) * 100).toFixed(2);
const saving = (full: Eval, e: Eval) => (full.meanMacs ? pct(1 - e.meanMacs / full.meanMacs, 1) : '-');
const ruleText = (p: Policy) => JSON.stringify(p);

function splitText(r: TuneResult<Policy>): string {
  const how = r.split.mode === 'tail' ? `the last ${r.split.held} frames (time order kept)` : `${r.split.held} held-out samples (share ${r.split.heldOut}, spread evenly)`;
  return `tuned on ${r.split.tune}, reported on ${how}; accuracy ${r.labelled ? 'against labels' : 'as agreement with the full model'}; max drop ${r.maxDrop} pp`;
}

/** Up to `n` rows of a front, evenly spread, ends kept. */
function thin<T>(xs: T[], n: number): T[] {
  if (xs.length <= n) return xs;
  return Array.from({ length: n }, (_, i) => xs[Math.round((i * (xs.length - 1)) / (n - 1))]);
}

export function tuneText(t: TuneReport, frontRows = 12): string {
  const r = t.result, full = r.full.held;
  const out: string[] = [splitText(r), `full model: accuracy ${pct(full.accuracy)}, ${si(full.meanMacs)} MACs per sample`, ''];
  out.push(table(['policy', 'settings', 'front', 'accuracy', 'drop pp', 'mean MACs', 'saving'], r.kinds.map((k) => [
    k.kind, String(k.evaluated), String(k.front.length), pct(k.chosen.held.accuracy), drop(full, k.chosen.held), si(k.chosen.held.meanMacs), saving(full, k.chosen.held),
  ])));
  out.push('', `chosen: ${ruleText(r.chosen.policy)}`);
  out.push(`  held-out accuracy ${pct(r.chosen.held.accuracy)} (drop ${drop(full, r.chosen.held)} pp), ${si(r.chosen.held.meanMacs)} MACs per sample, saving ${saving(full, r.chosen.held)}`);
  if (t.written) out.push(`  written into ${t.written}`);
  out.push('', 'exit histogram (held-out)');
  out.push(table(['exit', 'share', ''], r.chosen.held.exitShare.map((s, k) => [t.exitNames[k] ?? `exit ${k}`, pct(s, 1), '█'.repeat(Math.round(s * 40))])));
  for (const k of r.kinds) {
    out.push('', `front: ${k.kind} (${k.front.length} points${k.front.length > frontRows ? `, ${frontRows} shown` : ''}; tune part, then held-out)`);
    out.push(table(['MACs', 'accuracy', 'held MACs', 'held accuracy', 'setting'], thin(k.front, frontRows).map((p) => [
      si(p.tune.meanMacs), pct(p.tune.accuracy), si(p.held.meanMacs), pct(p.held.accuracy), settingText(p.policy),
    ])));
  }
  return out.join('\n') + '\n';
}

const num = (x: number | null) => (x === null ? '-' : Number(x.toPrecision(4)).toString());
function settingText(p: Policy): string {
  switch (p.kind) {
    case 'patience': return `p=${p.patience}`;
    case 'budget': return `budget ${si(p.budget)}${p.score ? ` + ${p.score} ${p.thresholds.map(num).join(' ')}` : ''}`;
    case 'difference': return `${p.distance} < ${num(p.thresholds[0])} at exit ${p.exit}${p.then ? ` then ${p.then.kind}` : ''}${p.refresh ? `, refresh ${p.refresh}` : ''}`;
    case 'agreeing': return `${p.distance} < ${num(p.thresholds[0])}${p.then ? ` then ${p.then.kind}` : ''}${p.refresh ? `, refresh ${p.refresh}` : ''}`;
    default: return p.thresholds.map(num).join(' ');
  }
}

export function tuneJson(t: TuneReport): string {
  const r = t.result;
  return toJson({
    schema: TUNE_SCHEMA, data: t.data, stream: t.stream, labelled: r.labelled, maxDrop: r.maxDrop, split: r.split,
    exits: t.exitNames, reach: r.reach, stages: t.stages, settings: r.settings,
    full: r.full, chosen: r.chosen, kinds: r.kinds, written: t.written ?? null,
    ...(r.guarantee && { guarantee: r.guarantee }), ...('scenes' in r && { scenes: (r as { scenes: unknown }).scenes }),
  }) + '\n';
}

// ── HTML ────────────────────────────────────────────────────────────────────
export function tuneHtml(t: TuneReport): string {
  const r = t.result, full = r.full.held;
  const series: Series[] = r.kinds.map((k, i) => ({
    name: k.kind, color: COLORS[i % COLORS.length], pts: k.front.map((p) => [p.held.meanMacs, p.held.accuracy * 100] as [number, number]),
    marks: [[k.chosen.held.meanMacs, k.chosen.held.accuracy * 100, `${k.kind} chosen: ${settingText(k.chosen.policy)}`]],
  }));
  series.push({ name: 'full model', color: '#000', pts: [], marks: [[full.meanMacs, full.accuracy * 100, 'full model']] });
  const rows = r.kinds.map((k) => `<tr><td>${esc(k.kind)}</td><td>${k.evaluated}</td><td>${k.front.length}</td><td>${pct(k.chosen.held.accuracy)}</td><td>${drop(full, k.chosen.held)}</td><td>${si(k.chosen.held.meanMacs)}</td><td>${saving(full, k.chosen.held)}</td><td><code>${esc(settingText(k.chosen.policy))}</code></td></tr>`);
  const fronts = r.kinds.map((k) => `<details><summary>front: ${esc(k.kind)} (${k.front.length} points)</summary><table><tr><th>MACs</th><th>accuracy</th><th>held MACs</th><th>held accuracy</th><th>setting</th></tr>${k.front.map((p: Point<Policy>) => `<tr><td>${si(p.tune.meanMacs)}</td><td>${pct(p.tune.accuracy)}</td><td>${si(p.held.meanMacs)}</td><td>${pct(p.held.accuracy)}</td><td><code>${esc(settingText(p.policy))}</code></td></tr>`).join('')}</table></details>`);
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>offramp tune: ${esc(t.data)}</title>
<style>body{font-family:sans-serif;max-width:980px;margin:2em auto;color:#222}table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:3px 8px;text-align:right}td:first-child,th:first-child{text-align:left}code{font-size:90%}</style>
</head><body>
<h1>Exit policy tuning</h1>
<p>${esc(splitText(r))}.</p>
<p>Full model: accuracy ${pct(full.accuracy)}, ${si(full.meanMacs)} MACs per sample. Chosen: <code>${esc(ruleText(r.chosen.policy))}</code>, held-out accuracy ${pct(r.chosen.held.accuracy)} (drop ${drop(full, r.chosen.held)} pp), ${si(r.chosen.held.meanMacs)} MACs per sample (saving ${saving(full, r.chosen.held)}).${t.written ? ` Written into <code>${esc(t.written)}</code>.` : ''}</p>
<table><tr><th>policy</th><th>settings</th><th>front</th><th>accuracy</th><th>drop pp</th><th>mean MACs</th><th>saving</th><th>setting</th></tr>${rows.join('')}</table>
${lineChart('Accuracy vs mean MACs (held-out part; rings: chosen per policy)', 'mean MACs per sample', 'accuracy %', series, (v) => si(v, 2), (v) => v.toFixed(1))}
${barChart('Exit histogram of the chosen policy (held-out)', t.exitNames, r.chosen.held.exitShare.map((s) => s * 100), (v) => `${v.toFixed(1)} %`, '#1f77b4')}
${barChart('MACs per stage', t.stages.map((s) => `stage ${s.index}${s.exits.length ? ` (${s.exits.join(', ')})` : ''}`), t.stages.map((s) => s.macs), (v) => si(v), '#ff7f0e')}
${fronts.join('\n')}
</body></html>
`;
}

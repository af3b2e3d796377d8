// Renderings of a tuning run: text tables, JSON (schema offramp-tune/2) and a
// self-contained HTML page with inline SVG charts. No timestamps or timings, so
// the same run renders to the same bytes. A result's guarantee and its front
// points' bounds render the same whatever tuned them (per frame or stream).
import { COLORS, esc, lineChart, barChart, type Series } from './svg.js';
import type { Eval, Point, PointBound, TuneResult } from '../tune/search.js';
import type { Guarantee } from '../tune/guarantee.js';
import type { Policy } from '../policy/policy.js';
import { si, table, toJson } from './units.js';
import { count, dropWords, exitLabel, points, promiseSentence } from './words.js';

export const TUNE_SCHEMA = 'offramp-tune/2';

export interface TuneReport {
  result: TuneResult<Policy>;
  /** exit names, the final output last */
  exitNames: string[];
  stages: { index: number; macs: number; exits: string[] }[];
  data: string;
  stream: boolean;
  written?: string;
  /** what happened to the manifest beyond `written`, in words */
  manifestNote?: string;
  /** files in the folder that describe the manifest as it was before this tuning (a build's reports, firmware) */
  stale?: string[];
}

const pct = (x: number, d = 2) => `${(x * 100).toFixed(d)} %`;
const drop = (full: Eval, e: Eval) => ((full.accuracy - e.accuracy) * 100).toFixed(2);
const saving = (full: Eval, e: Eval) => (full.meanMacs ? pct(1 - e.meanMacs / full.meanMacs, 1) : '-');
const ruleText = (p: Policy) => JSON.stringify(p);
const pp = (x: number) => `${x.toFixed(2)} pp`;

function splitText(r: TuneResult<Policy>): string {
  const how = r.split.mode === 'tail' ? `the last ${r.split.held} frames (time order kept)` : `${r.split.held} samples (share ${r.split.heldOut}, spread evenly)`;
  return `searched on ${r.split.tune}, certified and reported on ${how}; accuracy ${r.labelled ? 'against labels' : 'as agreement with the full model'}; max drop ${r.maxDrop} pp`;
}

/**
 * The promise with its method, for --verbose and the reports: two lines when a setting is certified,
 * one when the full model was kept. `setting` names a policy (the next, bolder setting the sequence stopped at).
 */
export function guaranteeLines(g: Guarantee, setting: (p: Policy) => string): string[] {
  const conf = `${+(g.confidence * 100).toFixed(4)} %`;
  const on = `${count(g.evidence, g.unit)}${g.unlabelled ? ` and ${g.unlabelled} unlabelled rows` : ''}`;
  const next = g.next;
  const nextText = !next ? 'no setting cheaper than the full model was found'
    : next.needed !== undefined ? `the next setting (${setting(next.policy as Policy)}: observed ${pp(next.estimate)}, bound ${pp(next.bound)}) would need about ${count(next.needed, g.unit)}`
      : `the next setting (${setting(next.policy as Policy)}) already loses ${pp(next.estimate)} observed, so more ${g.unit} would not certify it`;
  if (!g.certified) {
    return [`not certified: nothing cheaper than the full model keeps the drop within ${g.maxDrop} pp at ${conf} confidence on ${on}, so the full model is kept; ${nextText}`];
  }
  return [
    `promise: drop ≤ ${g.maxDrop} pp on new data with ${conf} confidence — certified bound ${pp(g.bound)} (observed ${pp(g.estimate)} on ${on}; margin ${pp(g.margin)})` +
      (g.nudged !== undefined ? `; thresholds one grid step cheaper: observed ${pp(g.nudged)}` : ''),
    `  ${g.method}; ${g.passed} of ${g.tested} tested passed${next ? `; ${nextText}` : ''}`,
  ];
}

const certCell = (c?: PointBound) => (c ? pp(c.bound) : '-');
const statusCell = (c?: PointBound) => (!c ? '' : c.passed ? 'passed' : c.tested ? 'failed' : '');

/** Up to `n` rows of a front, evenly spread, ends kept, and every point the sequence tested last or chose. */
function thin<T>(xs: T[], n: number, keep: (x: T) => boolean = () => false): T[] {
  if (xs.length <= n) return xs;
  const pick = new Set(Array.from({ length: n }, (_, i) => Math.round((i * (xs.length - 1)) / (n - 1))));
  xs.forEach((x, i) => { if (keep(x)) pick.add(i); });
  return [...pick].sort((a, b) => a - b).map((i) => xs[i]);
}

/** The chosen setting in words: its kind once, then its thresholds. */
const chosenName = (p: Policy, stream: boolean) => {
  const st = settingText(p);
  return stream ? `${p.kind} stream policy (${st})` : st.startsWith(p.kind) ? st : `${p.kind} (${st})`;
};

/** A setting that never leaves early: every threshold null on a score policy. */
export const isFull = (p: Policy) => ['confidence', 'entropy', 'margin'].includes(p.kind) && p.thresholds.every((x) => x === null);


/** "exit-0 47.4 %, exit-1 15.2 %, final 30.7 %": where the frames leave the chain, on one line. */
export const leavesLine = (names: string[], share: number[]) => share.map((s, k) => `${exitLabel(names, k)} ${pct(s, 1)}`).join(', ');

/** The chain folder a manifest path names, for the next commands. */
const folderOf = (written: string) => written.replace(/[\\/]manifest\.json$/, '');

/**
 * What a person reads after `tune`: the result in words (chosen, saving, accuracy, the promise), what
 * changed on disk, the next commands, one row per policy kind. `verbose` adds the split, the method,
 * the histogram and the fronts (the old long form).
 */
export function tuneText(t: TuneReport, o: { verbose?: boolean; frontRows?: number } = {}): string {
  const r = t.result, full = r.full.held, c = r.chosen.held, unit = t.stream ? 'frame' : 'sample';
  const early = !isFull(r.chosen.policy);
  const out: string[] = [
    early ? `chosen     ${chosenName(r.chosen.policy, t.stream)}: ${si(c.meanMacs)} MACs per ${unit} instead of ${si(full.meanMacs)}, ${saving(full, c)} saved`
      : `chosen     the full model on every ${unit} (${si(full.meanMacs)} MACs): no early exit could be certified`,
    `accuracy   ${pct(c.accuracy)} vs ${pct(full.accuracy)} for the full model (${dropWords(+drop(full, c))}) on the ${count(r.split.held, t.stream ? 'frames' : 'samples')} that certify${r.labelled ? '' : ' (agreement with the full model: no labels)'}`,
  ];
  if (r.guarantee) out.push(`promise    ${promiseSentence(r.guarantee)}`);
  out.push(`leaves at  ${leavesLine(t.exitNames, c.exitShare)}`);
  if (t.written) {
    out.push(`written    ${t.written}${t.stale?.length ? `; ${t.stale.join(', ')} still describe${t.stale.length === 1 ? 's' : ''} the manifest before this tuning` : ''}`);
  } else if (!t.manifestNote) out.push('written    nothing (--no-write): the manifest keeps its policy');
  if (t.manifestNote) out.push(`${t.written ? '           ' : 'manifest   '}${t.manifestNote}`);
  if (!early) {
    const h = uncertifiedHint(t);
    if (h) out.push(`observed   ${settingText(h.policy)} saves ${(h.saving * 100).toFixed(1)} % at an observed drop of ${points(h.drop)} on the certification part: NOT certified, not written; to try it anyway: --policy '${ruleText(h.policy)}'`);
    out.push(`next       more ${t.stream ? 'recording' : 'rows'}, a larger --max-drop, or exit heads that agree more with the full model (graft and build choose them when --head names none)`);
  }
  else if (t.written) {
    const dir = folderOf(t.written);
    out.push(`next       offramp emit-c ${dir} -o ${dir}/firmware    (the decision code for this policy)`,
      `           offramp replay ${dir} --data NEW.npy --labels NEW-y.npy    (frame by frame on data the tuning never saw)`);
  }
  out.push('', table(['policy', 'mean MACs', 'saving', 'drop', 'bound', 'best certified setting'], r.kinds.map((k) => [
    k.kind, si(k.chosen.held.meanMacs), saving(full, k.chosen.held), drop(full, k.chosen.held), k.chosen.cert ? k.chosen.cert.bound.toFixed(2) : '-',
    isFull(k.chosen.policy) ? 'none: the full model' : settingText(k.chosen.policy),
  ])), '(drop and bound in points of accuracy against the full model, on the certification part)');
  if (!o.verbose) {
    out.push('', `more       --verbose (the method, the fronts), --report FILE.html, --json`);
    return out.join('\n') + '\n';
  }
  out.push('', splitText(r), `full model: accuracy ${pct(full.accuracy)}, ${si(full.meanMacs)} MACs per sample; ${r.settings} settings evaluated`);
  if (r.guarantee) out.push(...guaranteeLines(r.guarantee, settingText), ...r.guarantee.assumes.map((a) => `  assumes: ${a}`));
  out.push(`  chosen as JSON: ${ruleText(r.chosen.policy)}`);
  out.push('', 'exit histogram (certification part)');
  out.push(table(['exit', 'share', ''], c.exitShare.map((s, k) => [exitLabel(t.exitNames, k), pct(s, 1), '█'.repeat(Math.round(s * 40))])));
  for (const k of r.kinds) {
    const shown = thin(k.front, o.frontRows ?? 12, (p) => p === k.chosen || (!!p.cert?.tested && !p.cert.passed));
    out.push('', `front: ${k.kind} (${k.front.length} points${shown.length < k.front.length ? `, ${shown.length} shown` : ''}; ${k.evaluated} settings; search part, then certification part)`);
    out.push(table(['MACs', 'accuracy', 'cert. MACs', 'cert. accuracy', 'drop pp', 'bound pp', 'test', 'setting'], shown.map((p) => [
      si(p.tune.meanMacs), pct(p.tune.accuracy), si(p.held.meanMacs), pct(p.held.accuracy), p.cert ? p.cert.estimate.toFixed(2) : drop(full, p.held), certCell(p.cert), statusCell(p.cert), settingText(p.policy),
    ])));
  }
  return out.join('\n') + '\n';
}

const num = (x: number | null) => (x === null ? '-' : Number(x.toPrecision(4)).toString());
export function settingText(p: Policy): string {
  switch (p.kind) {
    case 'patience': return `p=${p.patience}`;
    case 'budget': return `budget ${si(p.budget)}${p.score ? ` + ${p.score} ${p.thresholds.map(num).join(' ')}` : ''}`;
    case 'difference': return `${p.distance} < ${num(p.thresholds[0])} at exit ${p.exit}${p.then ? ` then ${p.then.kind}` : ''}${p.refresh ? `, refresh ${p.refresh}` : ''}`;
    case 'agreeing': return `${p.distance} < ${num(p.thresholds[0])}${p.then ? ` then ${p.then.kind}` : ''}${p.refresh ? `, refresh ${p.refresh}` : ''}`;
    default: return `${p.kind} ${p.thresholds.map(num).join(' ')}`;
  }
}

/**
 * When nothing certifies: the cheapest setting of any front whose observed drop on the certification part stays
 * within the promise, for a person to try by hand (never written into the manifest; it carries no promise).
 */
export function uncertifiedHint(t: TuneReport): { policy: Policy; saving: number; drop: number } | undefined {
  const r = t.result;
  if (!isFull(r.chosen.policy)) return undefined;
  const full = r.full.held;
  let best: { policy: Policy; saving: number; drop: number; macs: number } | undefined;
  for (const k of r.kinds) for (const p of k.front) {
    const d = p.cert ? p.cert.estimate : (full.accuracy - p.held.accuracy) * 100;
    if (isFull(p.policy) || d > r.maxDrop || p.held.meanMacs >= full.meanMacs) continue;
    if (!best || p.held.meanMacs < best.macs) best = { policy: p.policy, saving: full.meanMacs ? 1 - p.held.meanMacs / full.meanMacs : 0, drop: d, macs: p.held.meanMacs };
  }
  return best && { policy: best.policy, saving: best.saving, drop: best.drop };
}

export function tuneJson(t: TuneReport): string {
  const r = t.result;
  const hint = uncertifiedHint(t);
  return toJson({
    schema: TUNE_SCHEMA, data: t.data, stream: t.stream, labelled: r.labelled, maxDrop: r.maxDrop, split: r.split,
    exits: t.exitNames, reach: r.reach, stages: t.stages, settings: r.settings,
    guarantee: r.guarantee ?? null, full: r.full, chosen: r.chosen, kinds: r.kinds, written: t.written ?? null, ...(t.manifestNote && { manifestNote: t.manifestNote }),
    // nothing certified: the best observed setting, marked as carrying no promise (not in the manifest)
    ...(hint && { uncertified: { policy: hint.policy, savingShare: hint.saving, observedDropPoints: hint.drop, certified: false } }),
    ...('scenes' in r && { scenes: (r as { scenes: unknown }).scenes }),
  }) + '\n';
}

/**
 * Accuracy vs MACs on the certification part, with what the bounds guarantee: each front point's
 * full accuracy − bound (grey dots), and the promise (full accuracy − max drop, dashed by its two ends).
 */
export function frontSeries(kinds: { kind: string; front: Point<Policy>[]; chosen?: Point<Policy> }[], full: Eval, maxDrop: number): Series[] {
  const series: Series[] = kinds.map((k, i) => ({
    name: k.kind, color: COLORS[i % COLORS.length], pts: k.front.map((p) => [p.held.meanMacs, p.held.accuracy * 100] as [number, number]),
    marks: k.chosen && k.chosen.cert ? [[k.chosen.held.meanMacs, k.chosen.held.accuracy * 100, `${k.kind} chosen: ${settingText(k.chosen.policy)}`]] : [],
  }));
  const bounds = kinds.flatMap((k) => k.front.filter((p) => p.cert).map((p) => [p.held.meanMacs, (full.accuracy * 100) - p.cert!.bound] as [number, number])).sort((a, b) => a[0] - b[0]);
  if (bounds.length) {
    series.push({ name: 'guaranteed (bound)', color: '#999', pts: bounds, line: false });
    const xs = [...bounds.map((b) => b[0]), full.meanMacs];
    series.push({ name: `promise (−${maxDrop} pp)`, color: '#bbb', pts: [[Math.min(...xs), full.accuracy * 100 - maxDrop], [Math.max(...xs), full.accuracy * 100 - maxDrop]] });
  }
  series.push({ name: 'full model', color: '#000', pts: [], marks: [[full.meanMacs, full.accuracy * 100, 'full model']] });
  return series;
}

// ── HTML ────────────────────────────────────────────────────────────────────
export function tuneHtml(t: TuneReport): string {
  const r = t.result, full = r.full.held;
  const series = frontSeries(r.kinds, full, r.maxDrop);
  const rows = r.kinds.map((k) => `<tr><td>${esc(k.kind)}</td><td>${k.evaluated}</td><td>${k.front.length}</td><td>${pct(k.chosen.held.accuracy)}</td><td>${drop(full, k.chosen.held)}</td><td>${certCell(k.chosen.cert)}</td><td>${si(k.chosen.held.meanMacs)}</td><td>${saving(full, k.chosen.held)}</td><td><code>${esc(settingText(k.chosen.policy))}</code></td></tr>`);
  const fronts = r.kinds.map((k) => `<details><summary>front: ${esc(k.kind)} (${k.front.length} points)</summary><table><tr><th>MACs</th><th>accuracy</th><th>cert. MACs</th><th>cert. accuracy</th><th>drop pp</th><th>bound pp</th><th>test</th><th>setting</th></tr>${k.front.map((p: Point<Policy>) => `<tr><td>${si(p.tune.meanMacs)}</td><td>${pct(p.tune.accuracy)}</td><td>${si(p.held.meanMacs)}</td><td>${pct(p.held.accuracy)}</td><td>${p.cert ? p.cert.estimate.toFixed(2) : drop(full, p.held)}</td><td>${certCell(p.cert)}</td><td>${statusCell(p.cert)}</td><td><code>${esc(settingText(p.policy))}</code></td></tr>`).join('')}</table></details>`);
  const promise = r.guarantee ? [`<p class="promise">${esc(promiseSentence(r.guarantee))}.</p>`, ...guaranteeLines(r.guarantee, settingText).map((l) => `<p>${esc(l.trim())}</p>`)].join('\n') : '';
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>offramp tune: ${esc(t.data)}</title>
<style>body{font-family:sans-serif;max-width:980px;margin:2em auto;color:#222}table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:3px 8px;text-align:right}td:first-child,th:first-child{text-align:left}code{font-size:90%}.promise{font-weight:bold}</style>
</head><body>
<h1>Exit policy tuning</h1>
<p>${esc(splitText(r))}.</p>
<p>Full model: accuracy ${pct(full.accuracy)}, ${si(full.meanMacs)} MACs per sample. Chosen: <code>${esc(ruleText(r.chosen.policy))}</code>, accuracy ${pct(r.chosen.held.accuracy)} (drop ${drop(full, r.chosen.held)} pp), ${si(r.chosen.held.meanMacs)} MACs per sample (saving ${saving(full, r.chosen.held)}).${t.written ? ` Written into <code>${esc(t.written)}</code>.` : ''}</p>
${promise}
<table><tr><th>policy</th><th>settings</th><th>front</th><th>accuracy</th><th>drop pp</th><th>bound pp</th><th>mean MACs</th><th>saving</th><th>setting</th></tr>${rows.join('')}</table>
${lineChart('Accuracy vs mean MACs (certification part; rings: chosen per policy; grey: full accuracy − certified bound)', 'mean MACs per sample', 'accuracy %', series, (v) => si(v, 2), (v) => v.toFixed(1))}
${barChart('Exit histogram of the chosen policy (certification part)', t.exitNames.map((_, k) => exitLabel(t.exitNames, k)), r.chosen.held.exitShare.map((s) => s * 100), (v) => `${v.toFixed(1)} %`, '#1f77b4')}
${barChart('MACs per stage', t.stages.map((s) => `stage ${s.index}${s.exits.length ? ` (${s.exits.join(', ')})` : ''}`), t.stages.map((s) => s.macs), (v) => si(v), '#ff7f0e')}
${fronts.join('\n')}
</body></html>
`;
}

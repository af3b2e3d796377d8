// The build report: what was placed where, what the policy saves, whether the
// chain reproduces the model, and how each stage sits against the chip.
import type { BuildResult } from '../pipeline/build.js';
import type { Policy } from '../policy/policy.js';
import path from 'node:path';
import { bytes, si, table, toJson } from './units.js';
import { esc, lineChart, barChart, type Series } from './svg.js';
import { budgetText, duration, storedLabel } from './budget.js';
import { MANIFEST_FILE, type ManifestPolicy } from '../split/manifest.js';
import { frontSeries, guaranteeLines } from './tune.js';
import type { Guarantee } from '../certify/guarantee.js';
import type { DeviceReport } from '../measure/device.js';

export const BUILD_SCHEMA = 'offramp-build/2';

const pct = (x: number, d = 1) => `${(x * 100).toFixed(d)}%`;
const num = (x: number | null) => (x === null ? '-' : Number(x.toPrecision(4)).toString());

export function policyText(p: Policy): string {
  switch (p.kind) {
    case 'patience': return `patience ${p.patience}`;
    case 'budget': return `budget ${p.budget} MACs${p.score ? `, ${p.score} ≥ [${p.thresholds.map(num).join(', ')}]` : ''}`;
    case 'difference': case 'agreeing': return `${p.kind} (${p.distance} < ${num(p.thresholds[0])})${p.then ? `, then ${policyText(p.then)}` : ''}`;
    default: return `${p.kind} ${p.kind === 'entropy' ? '≤' : '≥'} [${p.thresholds.map(num).join(', ')}]`;
  }
}

/** Plain data for JSON and HTML: the numbers a build script or a person reads first. */
export function buildSummary(r: BuildResult) {
  const t = r.policy.tuned;
  return {
    source: r.source,
    model: r.model,
    /** the manifest this report describes */
    manifest: { file: MANIFEST_FILE, sha256: r.manifestSha256 },
    files: r.files.map((f) => path.relative(r.dir, f).split(path.sep).join('/')),
    exits: r.exits.map((e) => ({ output: e.output, cut: e.cut, head: e.head, macs: e.macs, params: e.params, fit: e.fit })),
    policy: r.policy.rule,
    heldOut: heldOutOf(t),
    guarantee: r.policy.guarantee ?? null,
    stages: r.manifest.stages.map((s, k) => ({
      file: s.file, macs: s.macs, weightBytes: r.cost.stages[k]?.paramBytes ?? BigInt(s.weightBytes),
      peakActivationBytes: r.cost.stages[k]?.peakActivationBytes ?? BigInt(s.peakActivationBytes),
      // Beside the peak, from the same view (the cost report's stages); the manifest keeps the stage files' own plans.
      arenaBytes: r.cost.stages[k]?.arenaBytes ?? (s.arenaBytes === undefined ? null : BigInt(s.arenaBytes)),
      handoverBytes: s.handoverBytes, exits: s.exits,
    })),
    check: { samples: r.check.samples, ok: r.check.ok, maxAbs: Math.max(0, ...r.check.diffs.map((d) => d.maxAbs)) },
    placement: {
      candidates: r.candidates.map((c) => ({ cut: c.cut, macFraction: c.macFraction, accuracy: c.head.fit.accuracy ?? null, agreement: c.head.fit.agreement })),
      tried: r.placement.tried.map((t) => ({ exits: t.exits.map((k) => r.candidates[k].cut), meanMacs: t.meanMacs, accuracy: t.accuracy })),
    },
    fronts: r.tuned.kinds.map((k) => ({ kind: k.kind, points: k.front.map((p) => ({ meanMacs: p.held.meanMacs, accuracy: p.held.accuracy, bound: p.cert?.bound ?? null, passed: p.cert?.passed ?? false })) })),
    budget: r.budget ?? null,
    ...(r.int8 && { int8: int8Summary(r) }),
    ...(r.device && { device: r.device }),
  };
}

/** The device headline: what the exits save on the (emulated) microcontroller, in instructions and estimated time. */
export function deviceLines(d: DeviceReport): string[] {
  const f = d.perFrame, ms = (us: number) => (us >= 1000 ? `${(us / 1000).toFixed(2)} ms` : `${us} µs`);
  return [
    `on device  emulated ${d.core}, int8 firmware on ${d.frames} rows: ${si(f.policy)} instructions per frame with the policy vs ${si(f.full)} for the whole network — ${(f.savedShare * 100).toFixed(1)} % saved`,
    `           ≈ ${ms(f.policyMicroseconds)} vs ${ms(f.fullMicroseconds)} per frame at ${d.basis.clockMhz} MHz (estimate: ${d.basis.cyclesPerInstruction} cycles per instruction; the instruction counts are exact); flash ${bytes(d.flash.libraryBytes)}, RAM ${bytes(d.ram.libraryBytes)} + stack ${bytes(d.ram.stackPeakBytes)}; answers ${d.answers.equalToReference === d.frames ? 'equal to' : 'DIFFERENT from'} the integer reference`,
  ];
}

/** A tuned policy's figures on the certification part, for report.json. */
const heldOutOf = (t: ManifestPolicy['tuned']) => ({
  samples: t.samples, labelled: t.labelled, accuracy: t.accuracy, fullAccuracy: t.fullAccuracy,
  dropPoints: (t.fullAccuracy - t.accuracy) * 100, maxDrop: t.maxDrop,
  meanMacs: t.meanMacs, fullMacs: t.fullMacs, saving: t.fullMacs ? 1 - t.meanMacs / t.fullMacs : 0, exitShare: t.exitShare,
});

/** build --int8: the quantized chain's policy and figures, beside the float ones. */
function int8Summary(r: BuildResult) {
  const q = r.int8!, t = q.policy.tuned;
  return {
    // the folder as moved into DIR (the build ran in a scratch folder beside it)
    dir: path.basename(q.dir),
    calibration: q.manifest.quantization!.calibration,
    policy: q.policy.rule,
    heldOut: heldOutOf(t),
    guarantee: q.policy.guarantee ?? null,
    agreement: q.agreement.outputs.map((a) => ({ output: a.name, samples: a.samples, agreement: a.agreement, maxAbs: a.maxAbs })),
    stages: q.manifest.stages.map((st) => ({ file: st.file, weightBytes: st.weightBytes, peakActivationBytes: st.peakActivationBytes, arenaBytes: st.arenaBytes ?? null, handoverBytes: st.handoverBytes })),
  };
}

export function buildJson(r: BuildResult): string {
  return toJson({ schema: BUILD_SCHEMA, ...buildSummary(r) }) + '\n';
}

/** The promise (or why there is none) under a `certified` line, aligned with the other rows. */
const promiseText = (g: Guarantee | null): string[] =>
  g ? guaranteeLines(g, policyText).map((l, i) => (i ? '           ' + l.trim() : `promise    ${l.replace(/^promise: /, '')}`)) : [];

/** The same for the HTML page: the first line bold. */
const promiseHtml = (g: Guarantee | null): string =>
  g ? `<b>${esc(guaranteeLines(g, policyText)[0])}</b>${guaranteeLines(g, policyText).slice(1).map((l) => ` ${esc(l.trim())}`).join('')}.` : '';

export function buildText(r: BuildResult): string {
  const s = buildSummary(r), h = s.heldOut;
  const rows = s.stages.map((st, k) => [
    st.file, si(st.macs), bytes(st.weightBytes), bytes(st.peakActivationBytes), st.arenaBytes === null ? '-' : bytes(st.arenaBytes), st.handoverBytes ? bytes(st.handoverBytes) : '-',
    st.exits.join(',') || '(final)', pct(h.exitShare[k] ?? 0),
  ]);
  const lines = [
    `built      ${r.dir}: ${s.exits.length} exit${s.exits.length === 1 ? '' : 's'}, ${s.stages.length} stages`,
    `exits at   ${s.exits.map((e) => `${e.cut} (${e.head})`).join(', ')}`,
    `policy     ${policyText(s.policy)}`,
    `certified  on ${h.samples} held-out samples: accuracy ${pct(h.accuracy, 2)} vs ${pct(h.fullAccuracy, 2)} for the full model (drop ${h.dropPoints.toFixed(2)} points, allowed ${h.maxDrop})${h.labelled ? '' : ' — against the model\'s own answers'}`,
    ...promiseText(s.guarantee),
    `MACs       ${si(Math.round(h.meanMacs))} per sample on average vs ${si(h.fullMacs)}: ${pct(h.saving)} saved`,
    `check      staged chain = grafted model on ${s.check.samples} samples: ${s.check.ok ? 'ok' : 'MISMATCH'} (max abs diff ${s.check.maxAbs})`,
    ...(r.headWarnings ?? []).map((w) => `note       ${w}`),
    '',
    table(['stage', 'MACs', 'weights', 'peak act.', 'arena', 'hands over', 'exit', 'leave here'], rows),
  ];
  if (r.int8) {
    const q = int8Summary(r), qh = q.heldOut;
    lines.push('',
      `int8       ${path.join(r.dir, q.dir)}: QDQ stage files, ${q.calibration.method} calibration on ${q.calibration.samples} rows; top-1 agreement with the grafted model ${q.agreement.map((a) => `${a.output} ${pct(a.agreement, 2)}`).join(', ')}`,
      `policy     ${policyText(q.policy)} (tuned on the int8 chain; the firmware uses it)`,
      `certified  on ${qh.samples} held-out samples: accuracy ${pct(qh.accuracy, 2)} vs ${pct(qh.fullAccuracy, 2)} for the full int8 chain (drop ${qh.dropPoints.toFixed(2)} points, allowed ${qh.maxDrop})${qh.labelled ? '' : ' — against the int8 chain\'s own answers'}`,
      ...promiseText(q.guarantee),
      `MACs       ${si(Math.round(qh.meanMacs))} per sample on average vs ${si(qh.fullMacs)}: ${pct(qh.saving)} saved (float32 chain: ${pct(h.saving)})`,
      '',
      table(['int8 stage', 'weights', 'peak act.', 'arena', 'hands over', 'leave here'], q.stages.map((st, k) => [st.file, bytes(st.weightBytes), bytes(st.peakActivationBytes), st.arenaBytes === null ? '-' : bytes(st.arenaBytes), st.handoverBytes ? bytes(st.handoverBytes) : '-', pct(qh.exitShare[k] ?? 0)])),
    );
  }
  if (r.budget) lines.push('', budgetText(r.budget, r.int8 ? 'int8 as stored' : storedLabel(r.cost)).trimEnd());
  // the number an engineer takes to a design review goes first
  return [...(r.device ? [...deviceLines(r.device), ''] : []), ...lines].join('\n') + '\n';
}

// ── HTML ────────────────────────────────────────────────────────────────────

function deviceHtml(d: DeviceReport): string {
  const f = d.perFrame;
  const rows = d.stages.map((st) => `<tr><td>${st.index}</td><td>${si(st.macs)}</td><td>${si(st.instructions)}</td><td>${st.instructionsPerMac.toFixed(2)}</td></tr>`).join('');
  const paths = d.paths.map((p) => `<tr><td>${p.exit === d.exits ? 'final output' : `exit ${p.exit}`}</td><td>${p.frames}</td><td>${si(p.meanInstructions)}</td></tr>`).join('');
  return `<h2>On the device (emulated ${esc(d.core)})</h2>
<p class="verdict">${si(f.policy)} instructions per frame with the policy against ${si(f.full)} for the whole network: ${(f.savedShare * 100).toFixed(1)} % saved.</p>
<p>The int8 firmware emit-c writes, compiled with arm-none-eabi-gcc for ${esc(d.core)} and run under QEMU (${esc(d.machine)}) on ${d.frames} rows; instructions counted exactly. Estimated ${f.policyMicroseconds} µs against ${f.fullMicroseconds} µs per frame at ${d.basis.clockMhz} MHz (${d.basis.cyclesPerInstruction} cycles per instruction, an estimate; no wait states). Flash ${bytes(d.flash.libraryBytes)}, RAM ${bytes(d.ram.libraryBytes)} + stack peak ${bytes(d.ram.stackPeakBytes)}. Answers equal to the TypeScript integer reference on ${d.answers.equalToReference} of ${d.frames} rows, to onnxruntime's on ${d.answers.equalToOnnxruntime}.</p>
<table><tr><th>stage</th><th>MACs</th><th>instructions</th><th>per MAC</th></tr>${rows}</table>
<table><tr><th>answer from</th><th>frames</th><th>instructions per frame</th></tr>${paths}</table>`;
}

/** The self-contained report page: summary, charts (inline SVG), stages against the chip, exit placement. */
export function buildHtml(r: BuildResult): string {
  const s = buildSummary(r), h = s.heldOut;
  const series: Series[] = frontSeries(r.tuned.kinds, r.tuned.full.held, h.maxDrop);
  series.push({ name: 'chosen', color: '#e377c2', pts: [], marks: [[h.meanMacs, h.accuracy * 100, `chosen: ${policyText(s.policy)}`]] });
  const exitNames = [...s.exits.map((e) => e.output), 'final'];
  const b = r.budget;
  const stageRows = s.stages.map((st, k) => {
    const sb = b?.stages[k];
    const fit = sb ? (sb.fits ? 'fits' : '<b>over</b>') : '-';
    const lat = sb ? `${duration(sb.stored.latencyNs)} <small>(${esc(sb.stored.latencyBasis)})</small>` : '-';
    return `<tr><td>${esc(st.file)}</td><td>${si(st.macs)}</td><td>${bytes(st.weightBytes)}</td><td>${bytes(st.peakActivationBytes)}</td><td>${st.arenaBytes === null ? '-' : bytes(st.arenaBytes)}</td><td>${st.handoverBytes ? bytes(st.handoverBytes) : '-'}</td><td>${esc(st.exits.join(', ') || 'final')}</td><td>${pct(h.exitShare[k] ?? 0)}</td><td>${lat}</td><td>${fit}</td></tr>`;
  }).join('');
  const candRows = s.placement.candidates.map((c) => `<tr><td><code>${esc(c.cut)}</code></td><td>${pct(c.macFraction)}</td><td>${c.accuracy === null ? '-' : pct(c.accuracy)}</td><td>${pct(c.agreement)}</td><td>${s.exits.some((e) => e.cut === c.cut) ? 'yes' : ''}</td></tr>`).join('');
  const target = b ? `${esc(b.target.name)}: flash ${bytes(b.target.flashBytes)}, RAM ${bytes(b.target.ramBytes)}, ${b.target.clockMhz} MHz, ${b.target.macsPerCycle} MAC/cycle float32 (${esc(b.target.rateBasis.float)}), ${b.target.int8MacsPerCycle} int8 (${esc(b.target.rateBasis.int8)})${b.target.rough ? '; flash, RAM and clock of a typical part, from memory' : ''}` : 'none given';
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>offramp build: ${esc(r.dir)}</title>
<style>body{font-family:sans-serif;max-width:980px;margin:2em auto;color:#222}table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:3px 8px;text-align:right}td:first-child,th:first-child{text-align:left}code{font-size:90%}.verdict{font-size:120%;font-weight:bold}.over{color:#b00}</style>
</head><body>
<h1>Early exits for <code>${esc(path.basename(r.source))}</code></h1>
<p class="verdict ${b && !b.fits ? 'over' : ''}">${b ? (b.fits ? 'Every stage fits the target.' : `Over budget: ${esc(b.over.map((o) => `stage ${o.stage} ${o.resource} by ${bytes(-o.margin)}`).join('; '))}.`) : 'No target given: stages are not judged.'}</p>
<ul>
<li>Exits at ${s.exits.map((e) => `<code>${esc(e.cut)}</code> (${esc(e.head)})`).join(', ')}; policy <code>${esc(policyText(s.policy))}</code>.</li>
<li>Certification part (${h.samples} held-out samples${h.labelled ? '' : ', against the model\u2019s own answers'}): accuracy ${pct(h.accuracy, 2)} vs ${pct(h.fullAccuracy, 2)} for the full model (drop ${h.dropPoints.toFixed(2)} points, allowed ${h.maxDrop}).</li>
${s.guarantee ? `<li>${promiseHtml(s.guarantee)}</li>` : ''}
<li>Mean MACs per sample ${si(Math.round(h.meanMacs))} vs ${si(h.fullMacs)}: <b>${pct(h.saving)} saved</b>.</li>
<li>Staged chain checked against the grafted model on ${s.check.samples} samples: ${s.check.ok ? 'identical outputs' : 'MISMATCH'} (max abs difference ${s.check.maxAbs}).</li>
${s.int8 ? `<li>int8 (<code>${esc(s.int8.dir)}</code>, QDQ stage files, ${esc(s.int8.calibration.method)} calibration on ${s.int8.calibration.samples} rows): policy <code>${esc(policyText(s.int8.policy))}</code> tuned on the int8 chain; accuracy ${pct(s.int8.heldOut.accuracy, 2)} vs ${pct(s.int8.heldOut.fullAccuracy, 2)} for the full int8 chain (drop ${s.int8.heldOut.dropPoints.toFixed(2)} points, allowed ${s.int8.heldOut.maxDrop}); ${s.int8.guarantee ? `${promiseHtml(s.int8.guarantee)} ` : ''}<b>${pct(s.int8.heldOut.saving)} saved</b> (float32 chain: ${pct(h.saving)}); top-1 agreement with the grafted model ${esc(s.int8.agreement.map((a) => `${a.output} ${pct(a.agreement, 2)}`).join(', '))}. The firmware, and the latency and verdicts below, are those of the int8 files as stored.</li>` : ''}
<li>Target: ${target}.</li>
<li>Describes <code>${MANIFEST_FILE}</code> with SHA-256 <code class="manifest-sha256">${esc(s.manifest.sha256)}</code>.</li>
</ul>
${r.device ? deviceHtml(r.device) : ''}
<h2>Stages</h2>
<table><tr><th>stage</th><th>MACs</th><th>weights</th><th>peak act.</th><th>arena</th><th>hands over</th><th>exit</th><th>leave here</th><th>latency</th><th>verdict</th></tr>${stageRows}</table>
${lineChart('Accuracy vs mean MACs per policy (certification part; grey: full accuracy − certified bound)', 'mean MACs per sample', 'accuracy %', series, (v) => si(v, 2), (v) => v.toFixed(1))}
${barChart('Exit histogram of the chosen policy (held-out)', exitNames, h.exitShare.map((x) => x * 100), (v) => `${v.toFixed(1)} %`, '#1f77b4')}
${barChart('MACs per stage', s.stages.map((st) => st.file.replace('.onnx', '')), s.stages.map((st) => st.macs), (v) => si(v), '#ff7f0e')}
<h2>Where the exits went</h2>
<p>Heads were fitted at every candidate cut; every set of up to ${Math.max(...s.placement.tried.map((t) => t.exits.length))} of them was searched on the search part, and the set whose forecast certified policy spends the fewest mean MACs was kept (the certification part is not read until the final tuning).</p>
<table><tr><th>candidate cut</th><th>MACs before</th><th>head accuracy</th><th>agreement</th><th>chosen</th></tr>${candRows}</table>
</body></html>
`;
}

// The build report: what was placed where, what the policy saves, whether the
// chain reproduces the model, and how each stage sits against the chip.
import type { BuildResult } from '../pipeline/build.js';
import type { Policy } from '../policy/policy.js';
import path from 'node:path';
import { bytes, microseconds, si, table, toJson } from './units.js';
import { trialsText } from './heads.js';
import { esc, lineChart, barChart, type Series } from './svg.js';
import { basisWord, budgetText, duration, overLine, storedLabel } from './budget.js';
import { count, dropWords, FINAL, promiseSentence } from './words.js';
import { roundNoise } from '../util/json.js';
import { MANIFEST_FILE, type ManifestPolicy } from '../split/manifest.js';
import { frontSeries, guaranteeLines } from './tune.js';
import type { Guarantee } from '../certify/guarantee.js';
import type { DeviceReport } from '../measure/device.js';

/** /3: as /2 plus `int8.againstFloat`, the deployed int8 chain set against the float model. */
export const BUILD_SCHEMA = 'offramp-build/3';

const pct = (x: number, d = 1) => `${(x * 100).toFixed(d)} %`;
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
    exits: r.exits.map((e) => ({ output: e.output, cut: e.cut, head: e.head, macs: e.macs, params: e.params, fit: e.fit, ...(e.choice && { choice: e.choice }) })),
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
  const f = d.perFrame;
  return [
    `on device  emulated ${d.core}, int8 firmware on ${d.frames} rows: ${si(f.policy)} instructions per frame with the policy vs ${si(f.full)} for the whole network — ${(f.savedShare * 100).toFixed(1)} % saved`,
    `           ≈ ${microseconds(f.policyMicroseconds)} vs ${microseconds(f.fullMicroseconds)} per frame at ${d.basis.clockMhz} MHz (estimate: ${d.basis.cyclesPerInstruction} cycles per instruction; the instruction counts are exact); flash ${bytes(d.flash.libraryBytes)}, RAM ${bytes(d.ram.libraryBytes)} + stack ${bytes(d.ram.stackPeakBytes)}; answers ${d.answers.equalToReference === d.frames ? 'equal to' : 'DIFFERENT from'} the integer reference`,
  ];
}

/** A tuned policy's figures on the certification part, for report.json. */
const heldOutOf = (t: ManifestPolicy['tuned']) => ({
  samples: t.samples, labelled: t.labelled, accuracy: t.accuracy, fullAccuracy: t.fullAccuracy,
  dropPoints: roundNoise((t.fullAccuracy - t.accuracy) * 100), maxDrop: t.maxDrop,
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
    // The deployed chain against the model the engineer trained, quantization included: observed on the
    // certification rows both chains were tuned with (labelled builds only), not certified.
    againstFloat: r.policy.tuned.labelled && t.labelled && r.policy.tuned.samples === t.samples
      ? { samples: t.samples, accuracy: t.accuracy, floatAccuracy: r.policy.tuned.fullAccuracy, dropPoints: roundNoise((r.policy.tuned.fullAccuracy - t.accuracy) * 100) }
      : null,
    stages: q.manifest.stages.map((st) => ({ file: st.file, weightBytes: st.weightBytes, peakActivationBytes: st.peakActivationBytes, arenaBytes: st.arenaBytes ?? null, handoverBytes: st.handoverBytes })),
  };
}

export function buildJson(r: BuildResult): string {
  return toJson({ schema: BUILD_SCHEMA, ...buildSummary(r) }) + '\n';
}

/** The promise (or why there is none) under a `certified` line, aligned with the other rows. */
const promiseText = (g: Guarantee | null): string[] =>
  g ? guaranteeLines(g, policyText).map((l, i) => (i ? '           ' + l.trim() : `promise    ${l.replace(/^promise: /, '')}`)) : [];

/** The same for the HTML page, in the method's words (the plain sentence heads the page). */
const promiseHtml = (g: Guarantee | null): string =>
  g ? `<span class="method">How it is certified: ${esc(guaranteeLines(g, policyText).map((l) => l.trim().replace(/^promise: /, '')).join('; '))}.</span>` : '';

/** The long form of the build (every figure), behind --verbose: cuts, methods, stage files, the budget per precision. */
function buildDetail(r: BuildResult): string[] {
  const s = buildSummary(r), h = s.heldOut;
  const rows = s.stages.map((st, k) => [
    st.file, si(st.macs), bytes(st.weightBytes), bytes(st.peakActivationBytes), st.arenaBytes === null ? '-' : bytes(st.arenaBytes), st.handoverBytes ? bytes(st.handoverBytes) : '-',
    st.exits.join(',') || FINAL, pct(h.exitShare[k] ?? 0),
  ]);
  const lines = [
    `exits at   ${s.exits.map((e) => `${e.cut} (${e.head})`).join(', ')}`,
    ...(s.exits.some((e) => e.choice) ? [
      "heads      chosen by the MACs each would save per frame on the fit's held-out rows:",
      ...s.exits.map((e) => `           ${e.output} ${e.head}: ${e.choice ? trialsText(e.choice.tried, ', ') : 'named by --head'}`),
    ] : []),
    `float32    ${policyText(s.policy)}: ${pct(h.saving)} saved, accuracy ${pct(h.accuracy, 2)} vs ${pct(h.fullAccuracy, 2)} for the full model on ${h.samples} held-out samples`,
    ...promiseText(s.guarantee),
    `check      staged chain = grafted model on ${s.check.samples} samples: ${s.check.ok ? 'ok' : 'MISMATCH'} (max abs diff ${s.check.maxAbs})`,
    '',
    table(['float32 stage', 'MACs', 'weights', 'peak act.', 'arena', 'hands over', 'exit', 'leaves here'], rows),
  ];
  if (r.int8) {
    const q = int8Summary(r), qh = q.heldOut;
    lines.push('',
      `int8       ${path.join(r.dir, q.dir)}: QDQ stage files, ${q.calibration.method} calibration on ${q.calibration.samples} rows; top-1 agreement with the grafted model ${q.agreement.map((a) => `${outName(a.output, s)} ${pct(a.agreement, 2)}`).join(', ')}`,
      `policy     ${policyText(q.policy)} (tuned on the int8 chain; the firmware uses it)`,
      ...promiseText(q.guarantee),
      '',
      table(['int8 stage', 'weights', 'peak act.', 'arena', 'hands over', 'leaves here'], q.stages.map((st, k) => [st.file, bytes(st.weightBytes), bytes(st.peakActivationBytes), st.arenaBytes === null ? '-' : bytes(st.arenaBytes), st.handoverBytes ? bytes(st.handoverBytes) : '-', pct(qh.exitShare[k] ?? 0)])),
    );
  }
  if (r.budget) lines.push('', budgetText(r.budget, r.int8 ? 'int8 as stored' : storedLabel(r.cost), { verbose: true }).trimEnd());
  return lines;
}

/** An output's name as the reports say it: exits keep theirs, the model's own output is the final output. */
const outName = (name: string, s: { exits: { output: string }[] }) => (s.exits.some((e) => e.output === name) ? name : FINAL);

/**
 * What a person reads after `build`: what was built, what the deployed policy saves, its promise in
 * one sentence, each stage against the target, where to read more and what to run next. With --int8
 * every figure is the int8 chain's (the one the firmware runs), the float chain's beside it where
 * comparing helps. `verbose` adds the long form.
 */
export function buildText(r: BuildResult, o: { verbose?: boolean } = {}): string {
  const s = buildSummary(r), q = r.int8 && int8Summary(r);
  const h = s.heldOut, d = q ? q.heldOut : h, policy = q ? q.policy : s.policy, g = q ? q.guarantee : s.guarantee;
  const full = q ? 'the full int8 chain' : 'the full model';
  // the number an engineer takes to a design review goes first
  const head = r.device ? [...deviceLines(r.device), ''] : [];
  const lines = [
    `built      ${r.dir}: ${count(s.exits.length, 'exits')} (${[...new Set(s.exits.map((e) => e.head))].join(', ')} heads), ${s.stages.length} stages; ` +
      (s.check.ok ? `the stages compute what the grafted model does (${s.check.samples} samples)` : `MISMATCH: the stages differ from the grafted model (max abs diff ${s.check.maxAbs})`),
  ];
  if (q) lines.push(`deployed   the int8 chain in ${path.join(r.dir, q.dir)} (the firmware runs it); same top-1 as the grafted model on ${q.agreement.map((a) => `${pct(a.agreement, 1)} (${outName(a.output, s)})`).join(', ')}`);
  const early = d.meanMacs < d.fullMacs;
  lines.push(early
    ? `chosen     ${policyText(policy)}: ${si(Math.round(d.meanMacs))} MACs per sample on average instead of ${si(d.fullMacs)}, ${pct(d.saving)} saved${q ? ` (float32 chain: ${pct(h.saving)})` : ''}`
    : `chosen     the full model on every sample (${si(d.fullMacs)} MACs): no early exit could be certified`);
  lines.push(`accuracy   ${pct(d.accuracy, 2)} vs ${pct(d.fullAccuracy, 2)} for ${full} (${dropWords(d.dropPoints)})` +
    (q?.againstFloat ? `, vs ${pct(q.againstFloat.floatAccuracy, 2)} for the float model (${dropWords(q.againstFloat.dropPoints)}, quantization included)` : '') +
    ` on ${d.samples} held-out samples${d.labelled ? '' : ' (agreement with its own answers: no labels)'}`);
  if (g) lines.push(`promise    ${promiseSentence(g, full)}`);
  // a candidate head that learnt nothing is worth a line by default: the placement had less to choose from
  lines.push(...(r.headWarnings ?? []).map((w) => `note       ${w}`));
  const b = r.budget;
  if (b) {
    const gate = b.gate === 'stored' ? (q ? 'the int8 files as stored' : storedLabel(r.cost)) : 'an int8 projection';
    lines.push(`target     ${b.target.name}${!b.target.rough ? '' : b.target.rateBasis.float === 'measured' || b.target.rateBasis.int8 === 'measured' ? ' (MAC rates measured on the emulated core; flash, RAM and clock from memory: give your part\'s own)' : ' (rough figures, from memory: give your part\'s own)'}: ${b.fits ? 'every stage fits' : `OVER BUDGET: ${overLine(b.over[0], q ? 'int8 as stored' : storedLabel(r.cost))}`}, judged on ${gate}`);
  }
  lines.push('', table(['stage', 'MACs', 'weights', 'RAM', 'latency', 'exit', 'leaves here', ...(b ? ['verdict'] : [])], s.stages.map((st, k) => {
    const c = b?.stages[k]?.[b.gate];
    const weights = q ? BigInt(q.stages[k]?.weightBytes ?? 0) : st.weightBytes;
    return [String(k), si(st.macs), bytes(c ? c.weightBytes : weights), c ? bytes(c.ram.need) : bytes(st.arenaBytes ?? st.peakActivationBytes), c ? duration(c.cumulativeNs) : '-',
      st.exits.join(',') || FINAL, pct(d.exitShare[k] ?? 0), ...(c ? [c.flash.fits && c.ram.fits ? 'fits' : 'OVER'] : [])];
  })));
  const bases = b ? [...new Set(b.stages.map((x) => basisWord(x[b.gate].latencyBasis)))].join(', ') : '';
  lines.push(`(weights in flash; RAM: the stage's arena plus the buffers it hands over; latency: to the end of the stage${b ? `, ${bases}` : ''})`);
  if (!o.verbose) {
    lines.push('',
      `read       ${path.join(r.dir, 'report.html')} (report.json for scripts; firmware C in ${path.join(r.dir, 'firmware')})`,
      `next       offramp replay ${r.dir}${q ? `/${q.dir}` : ''} --data NEW.npy --labels NEW-y.npy    (the policy on data the build never saw)`,
      `more       --verbose (cuts, stage files, the budget per precision and how each figure is counted), --json`);
    return [...head, ...lines].join('\n') + '\n';
  }
  return [...head, ...lines, '', ...buildDetail(r), '', `grafted    ${r.model} (stage files and model are named by their content)`, `report     ${path.join(r.dir, 'report.html')} (and report.json)`].join('\n') + '\n';
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
  const s = buildSummary(r), h = s.heldOut, q = r.int8 && int8Summary(r);
  // The page describes the chain the firmware runs: with --int8, the int8 chain; the float figures beside it.
  const d = q ? q.heldOut : h, policy = q ? q.policy : s.policy, tuned = q ? r.int8!.tuned : r.tuned;
  const series: Series[] = frontSeries(tuned.kinds, tuned.full.held, d.maxDrop);
  series.push({ name: 'chosen', color: '#e377c2', pts: [], marks: [[d.meanMacs, d.accuracy * 100, `chosen: ${policyText(policy)}`]] });
  const exitNames = [...s.exits.map((e) => e.output), FINAL];
  const b = r.budget;
  const stageRows = s.stages.map((st, k) => {
    const sb = b?.stages[k], c = sb?.[b!.gate];
    const fit = sb ? (sb.fits ? 'fits' : '<b>over</b>') : '-';
    const lat = c ? `${duration(c.latencyNs)} <small>(${esc(c.latencyBasis)})</small>` : '-';
    const file = q ? q.stages[k].file : st.file;
    const w = q ? BigInt(q.stages[k].weightBytes) : st.weightBytes;
    const peak = q ? BigInt(q.stages[k].peakActivationBytes) : st.peakActivationBytes;
    const arena = q ? q.stages[k].arenaBytes : st.arenaBytes;
    const hand = q ? q.stages[k].handoverBytes : st.handoverBytes;
    const float = q ? `<td>${bytes(st.weightBytes)}</td><td>${bytes(st.peakActivationBytes)}</td>` : '';
    return `<tr><td>${k}</td><td><code>${esc(file)}</code></td><td>${si(st.macs)}</td><td>${bytes(w)}</td><td>${bytes(peak)}</td><td>${arena === null || arena === undefined ? '-' : bytes(BigInt(arena))}</td><td>${hand ? bytes(BigInt(hand)) : '-'}</td>${float}<td>${esc(st.exits.join(', ') || FINAL)}</td><td>${pct(d.exitShare[k] ?? 0)}</td><td>${lat}</td><td>${fit}</td></tr>`;
  }).join('');
  const candRows = s.placement.candidates.map((c) => `<tr><td><code>${esc(c.cut)}</code></td><td>${pct(c.macFraction)}</td><td>${c.accuracy === null ? '-' : pct(c.accuracy)}</td><td>${pct(c.agreement)}</td><td>${s.exits.some((e) => e.cut === c.cut) ? 'yes' : ''}</td></tr>`).join('');
  const target = b ? `${esc(b.target.name)}: flash ${bytes(b.target.flashBytes)}, RAM ${bytes(b.target.ramBytes)}, ${b.target.clockMhz} MHz, ${b.target.macsPerCycle} MAC/cycle float32 (${esc(b.target.rateBasis.float)}), ${b.target.int8MacsPerCycle} int8 (${esc(b.target.rateBasis.int8)})${b.target.rough ? '; flash, RAM and clock of a typical part, from memory' : ''}` : 'none given';
  const chain = q ? 'int8' : 'float32';
  const full = q ? 'the full int8 chain' : 'the full model';
  const g = q ? q.guarantee : s.guarantee;
  const e2e = q?.againstFloat ? ` Against the float model (${pct(q.againstFloat.floatAccuracy, 2)}): ${dropWords(q.againstFloat.dropPoints)}, quantization included (observed on the same samples).` : '';
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>offramp build: ${esc(r.dir)}</title>
<style>body{font-family:sans-serif;max-width:1080px;margin:2em auto;color:#222}table{border-collapse:collapse;margin:1em 0}td,th{border:1px solid #ccc;padding:3px 8px;text-align:right;white-space:nowrap}td:first-child,th:first-child{text-align:left}code{font-size:90%}.verdict{font-size:120%;font-weight:bold}.over{color:#b00}.promise{font-weight:bold}</style>
</head><body data-chain="${chain}">
<h1>Early exits for <code>${esc(path.basename(r.source))}</code></h1>
<p class="verdict ${b && !b.fits ? 'over' : ''}">${b ? (b.fits ? 'Every stage fits the target.' : `Over budget: ${esc(b.over.map((o) => `stage ${o.stage} ${o.resource} by ${bytes(-o.margin)}`).join('; '))}.`) : 'No target given: stages are not judged.'}</p>
${g ? `<p class="promise">${esc(promiseSentence(g, full))}.</p>` : ''}
<ul>
<li>The chain the firmware runs: <b>${q ? `int8</b> (<code>${esc(q.dir)}</code>, QDQ stage files, ${esc(q.calibration.method)} calibration on ${q.calibration.samples} rows; same top-1 as the grafted model on ${esc(q.agreement.map((a) => `${pct(a.agreement, 2)} (${outName(a.output, s)})`).join(', '))})` : 'float32</b>'}.</li>
<li>Exits at ${s.exits.map((e) => `<code>${esc(e.cut)}</code> (${esc(e.head)})`).join(', ')}; policy <code>${esc(policyText(policy))}</code>${q ? ' (tuned on the int8 chain)' : ''}.</li>
<li>Mean MACs per sample ${si(Math.round(d.meanMacs))} vs ${si(d.fullMacs)}: <b>${pct(d.saving)} saved</b>${q ? ` (float32 chain: ${pct(h.saving)})` : ''}.</li>
<li>Certification part (${d.samples} held-out samples${d.labelled ? '' : ', against the chain\u2019s own answers'}): accuracy ${pct(d.accuracy, 2)} vs ${pct(d.fullAccuracy, 2)} for ${full} (${dropWords(d.dropPoints)}, allowed ${d.maxDrop}).${e2e}</li>
${g ? `<li>${promiseHtml(g)}</li>` : ''}
${q ? `<li>The float32 chain: policy <code>${esc(policyText(s.policy))}</code>, ${pct(h.saving)} saved, accuracy ${pct(h.accuracy, 2)} vs ${pct(h.fullAccuracy, 2)} for the full model; ${s.guarantee ? esc(promiseSentence(s.guarantee)) : ''}.</li>` : ''}
<li>Staged chain checked against the grafted model on ${s.check.samples} samples: ${s.check.ok ? 'identical outputs' : 'MISMATCH'} (max abs difference ${s.check.maxAbs}).</li>
<li>Target: ${target}.</li>
<li>Describes <code>${MANIFEST_FILE}</code> with SHA-256 <code class="manifest-sha256">${esc(s.manifest.sha256)}</code>.</li>
</ul>
${r.device ? deviceHtml(r.device) : ''}
<h2>Stages${q ? ' of the int8 chain' : ''}</h2>
<table class="stages"><tr><th>stage</th><th>file</th><th>MACs</th><th>weights</th><th>peak act.</th><th>arena</th><th>hands over</th>${q ? '<th>float32 weights</th><th>float32 peak act.</th>' : ''}<th>exit</th><th>leaves here</th><th>latency</th><th>verdict</th></tr>${stageRows}</table>
${lineChart(`Accuracy vs mean MACs per policy on the ${chain} chain (certification part; grey: full accuracy − certified bound)`, 'mean MACs per sample', 'accuracy %', series, (v) => si(v, 2), (v) => v.toFixed(1))}
${barChart(`Exit histogram of the ${chain} policy (held-out)`, exitNames, d.exitShare.map((x) => x * 100), (v) => `${v.toFixed(1)} %`, '#1f77b4')}
${barChart('MACs per stage', s.stages.map((st, k) => `stage ${k}`), s.stages.map((st) => st.macs), (v) => si(v), '#ff7f0e')}
<h2>Where the exits went</h2>
<p>Heads were fitted at every candidate cut; every set of up to ${Math.max(...s.placement.tried.map((t) => t.exits.length))} of them was searched on the search part, and the set whose forecast certified policy spends the fewest mean MACs was kept (the certification part is not read until the final tuning).</p>
<table><tr><th>candidate cut</th><th>MACs before</th><th>head accuracy</th><th>agreement</th><th>chosen</th></tr>${candRows}</table>
</body></html>
`;
}

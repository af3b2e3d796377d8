// The build report: what was placed where, what the policy saves, whether the
// chain reproduces the model, and how each stage sits against the chip.
import type { BuildResult } from '../build/build.js';
import type { Policy } from '../policy/policy.js';
import { bytes, si, table, toJson } from './units.js';
import { budgetText, storedLabel } from './budget.js';

export const BUILD_SCHEMA = 'offramp-build/1';

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
    model: r.model,
    exits: r.exits.map((e) => ({ output: e.output, cut: e.cut, head: e.head, macs: e.macs, params: e.params, fit: e.fit })),
    policy: r.policy.rule,
    heldOut: {
      samples: t.samples, labelled: t.labelled, accuracy: t.accuracy, fullAccuracy: t.fullAccuracy,
      dropPoints: (t.fullAccuracy - t.accuracy) * 100, maxDrop: t.maxDrop,
      meanMacs: t.meanMacs, fullMacs: t.fullMacs, saving: t.fullMacs ? 1 - t.meanMacs / t.fullMacs : 0, exitShare: t.exitShare,
    },
    stages: r.manifest.stages.map((s, k) => ({
      file: s.file, macs: s.macs, weightBytes: r.cost.stages[k]?.paramBytes ?? BigInt(s.weightBytes),
      peakActivationBytes: r.cost.stages[k]?.peakActivationBytes ?? BigInt(s.peakActivationBytes),
      handoverBytes: s.handoverBytes, exits: s.exits,
    })),
    check: { samples: r.check.samples, ok: r.check.ok, maxAbs: Math.max(0, ...r.check.diffs.map((d) => d.maxAbs)) },
    placement: {
      candidates: r.candidates.map((c) => ({ cut: c.cut, macFraction: c.macFraction, accuracy: c.head.fit.accuracy ?? null, agreement: c.head.fit.agreement })),
      tried: r.placement.tried.map((t) => ({ exits: t.exits.map((k) => r.candidates[k].cut), meanMacs: t.meanMacs, accuracy: t.accuracy })),
    },
    fronts: r.tuned.kinds.map((k) => ({ kind: k.kind, points: k.front.map((p) => ({ meanMacs: p.held.meanMacs, accuracy: p.held.accuracy })) })),
    budget: r.budget ?? null,
  };
}

export function buildJson(r: BuildResult): string {
  return toJson({ schema: BUILD_SCHEMA, ...buildSummary(r) }) + '\n';
}

export function buildText(r: BuildResult): string {
  const s = buildSummary(r), h = s.heldOut;
  const rows = s.stages.map((st, k) => [
    st.file, si(st.macs), bytes(st.weightBytes), bytes(st.peakActivationBytes), st.handoverBytes ? bytes(st.handoverBytes) : '-',
    st.exits.join(',') || '(final)', pct(h.exitShare[k] ?? 0),
  ]);
  const lines = [
    `built      ${r.dir}: ${s.exits.length} exit${s.exits.length === 1 ? '' : 's'}, ${s.stages.length} stages`,
    `exits at   ${s.exits.map((e) => `${e.cut} (${e.head})`).join(', ')}`,
    `policy     ${policyText(s.policy)}`,
    `held out   ${h.samples} samples: accuracy ${pct(h.accuracy, 2)} vs ${pct(h.fullAccuracy, 2)} for the full model (drop ${h.dropPoints.toFixed(2)} points, allowed ${h.maxDrop})${h.labelled ? '' : ' — against the model\'s own answers'}`,
    `MACs       ${si(Math.round(h.meanMacs))} per sample on average vs ${si(h.fullMacs)}: ${pct(h.saving)} saved`,
    `check      staged chain = grafted model on ${s.check.samples} samples: ${s.check.ok ? 'ok' : 'MISMATCH'} (max abs diff ${s.check.maxAbs})`,
    '',
    table(['stage', 'MACs', 'weights', 'peak act.', 'hands over', 'exit', 'leave here'], rows),
  ];
  if (r.budget) lines.push('', budgetText(r.budget, storedLabel(r.cost)).trimEnd());
  return lines.join('\n') + '\n';
}

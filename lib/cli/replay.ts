// `offramp replay DIR --data X.npy`: the chain frame by frame under the tuned
// (or a given) policy, with per-frame exits, MACs, results and scenes.
import path from 'node:path';
import type { Command } from 'commander';
import { loadChain } from '../run/chain.js';
import { captureCache, chainLayout, readLabels } from '../tune/chain-capture.js';
import { replay, withDrop, type ReplayResult } from '../tune/replay.js';
import { argmax } from '../policy/index.js';
import { checkPolicy, isStream, type Policy } from '../policy/policy.js';
import { count, dropWords, exitLabel, FINAL, points } from '../report/words.js';
import { si, toJson } from '../report/units.js';
import { OfframpError } from '../errors.js';
import { emit } from './common.js';
import { refuseInputsAsOutputs, splitReads } from './guard.js';
import { readDataHeader } from '../data/npy.js';
import { chooseChain } from '../split/read.js';
import { readRegular } from '../util/fsx.js';
import { parseJsonText } from '../util/json.js';
import { writeAtomic } from '../util/atomic.js';

/** --policy: inline JSON, or a JSON file. */
function readPolicy(v: string): unknown {
  const inline = v.trim().startsWith('{');
  const text = inline ? v : readRegular(v, 'policy').toString('utf8');
  const j = parseJsonText(text, 'a policy object');
  if (!j.ok) throw new OfframpError(inline ? 'usage' : 'data', j.message, inline ? '--policy' : v);
  return j.value;
}

export const replayCsv = (r: ReplayResult): string => {
  const withTruth = r.frames.some((f) => f.truth !== undefined);
  const head = ['frame', 'exit', 'exit_index', 'macs', 'label', 'scene', 'reused', ...(withTruth ? ['truth', 'correct'] : [])];
  return [head.join(','), ...r.frames.map((f) => [f.frame, f.exit === r.exits.length - 1 ? FINAL : f.exitName, f.exit, f.macs, f.label, f.scene, f.reused ? 1 : 0, ...(withTruth ? [f.truth, f.truth === f.label ? 1 : 0] : [])].join(','))].join('\n') + '\n';
};

/** What a person reads after a replay: the saving, the accuracy against the full model and the promise, where frames left. */
function replayText(r: ReplayResult): string {
  const s = r.summary;
  const pct = (x: number) => `${(x * 100).toFixed(2)} %`;
  const stream = isStream(r.policy);
  const g = s.promise;
  return [
    `replayed   ${count(s.frames, 'frames')}: ${si(s.meanMacs)} MACs per frame on average instead of ${si(s.fullMacs)}, ${pct(s.saving)} saved`,
    ...(s.drop === undefined ? [`accuracy   ${s.accuracy === undefined ? 'not measured (no --labels)' : pct(s.accuracy)}`]
      : [`accuracy   ${pct(s.accuracy!)} vs ${pct(s.fullAccuracy!)} for the full model on these frames (${dropWords(s.drop)})`]),
    ...(g && s.drop !== undefined ? [`promise    ${g.kept ? 'kept' : 'BROKEN'}: the tuned policy promises a drop of at most ${points(g.maxDrop)} at ${+(g.confidence * 100).toFixed(4)} % confidence on new data like its tuning data (observed here: ${dropWords(s.drop)})`] : []),
    `leaves at  ${s.exitShare.map((x, k) => `${exitLabel(r.exits, k)} ${pct(x)}`).join(', ')}`,
    // scenes and reuse belong to stream policies; a per-frame policy starts a scene on every frame
    ...(stream ? [`scenes     ${count(s.scenes, 'scenes')} seen; ${pct(s.reusedShare)} of frames reused their scene's result`] : []),
    `policy     ${JSON.stringify(r.policy)}`,
  ].join('\n') + '\n';
}

export function replayCommand(program: Command): void {
  program.command('replay')
    .description('run the chain frame by frame (temporal order) under the tuned or a given policy')
    .argument('<dir>', 'split folder (or its manifest.json)')
    .requiredOption('--data <file>', '.npy frames [N, ...] in temporal order')
    .option('--labels <file>', '.npy labels [N], for accuracy')
    .option('--recordings <file>', '.npy recording id per frame [N], for data that holds several recordings end to end: where the id changes a new stream starts (no scene carries over). Not scene annotations: the policy must find scene changes itself')
    .option('--policy <json|file>', 'policy as JSON (default: the one tune wrote into the manifest)')
    .option('--csv <file>', 'write one CSV row per frame')
    .option('--json', 'machine-readable result (schema offramp-replay/1)')
    .option('--float', 'on a build --int8 folder: the float chain, not the int8 one it deploys')
    .action(async (where: string, o: { data: string; labels?: string; recordings?: string; policy?: string; csv?: string; json?: boolean; float?: boolean }) => {
      const choice = chooseChain(where, { float: o.float });
      const dir = choice.file;
      const chain = await loadChain(dir);
      try {
        const policyFile = o.policy !== undefined && !o.policy.trim().startsWith('{') ? o.policy : undefined;
        refuseInputsAsOutputs([...splitReads(dir, chain.manifest), { file: o.data, role: 'data' }, { file: o.labels, role: 'labels' },
          { file: o.recordings, role: 'recordings' }, { file: policyFile, role: 'policy' }], [o.csv]);
        const layout = chainLayout(chain.manifest, chain.dir);
        const rows = readDataHeader(o.data).rows;
        const labels = o.labels ? readLabels(o.labels, { rows, of: o.data, classes: layout.classes }) : undefined;
        const recordings = o.recordings ? readLabels(o.recordings, { rows, of: o.data, what: 'recording id' }) : undefined;
        const raw = o.policy ? readPolicy(o.policy) : chain.manifest.policy?.rule;
        if (!raw) throw new OfframpError('usage', 'no policy in the manifest: run offramp tune first, or give --policy', chain.dir);
        let policy: Policy;
        // A policy error names where the policy came from: the manifest file, or --policy.
        try { policy = checkPolicy(raw, layout.exits.length, o.policy ? '--policy' : 'policy'); } catch (e) {
          throw e instanceof OfframpError && !o.policy ? new OfframpError(e.kind, e.message, path.join(chain.dir, 'manifest.json'), e.where) : e;
        }
        let r = await replay(chain, layout, policy, o.data, { labels, recordings });
        if (labels) {
          // the full model's answers on the same frames, batched: the drop the promise is about
          const { cache } = await captureCache(chain, o.data);
          const E1 = cache.exits + 1, C = cache.classes;
          let right = 0;
          for (let i = 0; i < cache.samples; i++) if (argmax(cache.logits, (i * E1 + cache.exits) * C, C) === labels[i]) right++;
          r = { ...r, summary: withDrop(r.summary, cache.samples ? right / cache.samples : 0, o.policy ? undefined : chain.manifest.policy?.guarantee) };
        }
        if (o.csv) writeAtomic(o.csv, replayCsv(r));
        // per-frame rows go to --csv: a JSON of every frame would dwarf the summary scripts read
        emit(o.json ? toJson({ schema: 'offramp-replay/1', chain: { manifest: choice.file, precision: choice.precision }, data: o.data, policy: r.policy, exits: r.exits, summary: r.summary }) + '\n' : `${choice.line}\n${replayText(r)}`);
      } finally { await chain.release(); }
    });
}

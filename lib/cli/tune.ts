// `offramp tune DIR --data X.npy [--labels y.npy]`: capture every exit once,
// search policies and thresholds on the cache, write the chosen one into the manifest.
import type { Command } from 'commander';
import { loadChain } from '../run/chain.js';
import { writeManifestPolicy } from '../split/manifest.js';
import { captureCache, readLabels } from '../tune/chain-capture.js';
import { readNpyHeader } from '../data/npy.js';
import { progressBar } from './progress.js';
import { tune, TUNE_KINDS, type FrameKind } from '../tune/search.js';
import { tuneStream } from '../tune/stream.js';
import { STREAM_KINDS, type FramePolicy, type Policy, type StreamPolicy } from '../policy/policy.js';
import { tuneHtml, tuneJson, tuneText, type TuneReport } from '../report/tune.js';
import type { TuneResult } from '../tune/search.js';
import { OfframpError, usageError } from '../errors.js';
import { emit, splitList } from './common.js';
import { writeAtomic } from '../util/atomic.js';

export const share = (v: string, what: string, lo: number, hi: number, open = false): number => {
  const x = Number(v);
  if (!(open ? x > lo && x < hi : x >= lo && x <= hi)) throw usageError(`${what} takes a number ${open ? 'strictly ' : ''}between ${lo} and ${hi}, not '${v}'`);
  return x;
};

export function tuneCommand(program: Command): void {
  program.command('tune')
    .description('choose the exit policy and thresholds that spend the fewest MACs within an accuracy drop; write it into the manifest')
    .argument('<dir>', 'split folder (or its manifest.json)')
    .requiredOption('--data <file>', '.npy inputs [N, ...] (in temporal order for --stream)')
    .option('--labels <file>', '.npy labels [N]; without them accuracy is agreement with the full model')
    .option('--max-drop <pp>', 'accuracy the policy may lose against the full model, percentage points', '1')
    .option('--policy <list>', `policy kinds to tune: ${[...TUNE_KINDS, ...STREAM_KINDS].join(', ')} (default: all per-frame kinds, or both stream kinds with --stream)`)
    .option('--stream', 'tune the stream policies (difference, agreeing) on the data as an ordered sequence')
    .option('--segments <file>', '.npy scene id per frame [N] (with --stream): a change of id starts a scene; default: runs of the full model\'s answers')
    .option('--held-out <share>', 'share of the data held out for the choice and the report', '0.5')
    .option('--grid <n>', 'threshold candidates per exit', '32')
    .option('--report <file>', 'write a self-contained HTML report')
    .option('--json', 'machine-readable result (schema offramp-tune/1)')
    .option('--no-write', 'leave the manifest as it is')
    .action(async (dir: string, o: { data: string; labels?: string; maxDrop: string; policy?: string; stream?: boolean; heldOut: string; grid: string; report?: string; json?: boolean; write: boolean; segments?: string; confidence?: string }) => {
      const maxDrop = share(o.maxDrop, '--max-drop', 0, 100);
      const heldOut = share(o.heldOut, '--held-out', 0, 1, true);
      const grid = Number(o.grid);
      if (!(Number.isInteger(grid) && grid >= 2)) throw usageError(`--grid takes a whole number ≥ 2, not '${o.grid}'`);
      const kinds = splitList(o.policy);
      for (const k of kinds) if (![...TUNE_KINDS, ...STREAM_KINDS].includes(k as never)) throw usageError(`unknown policy kind '${k}' (one of ${[...TUNE_KINDS, ...STREAM_KINDS].join(', ')})`);
      const frameKinds = kinds.filter((k) => TUNE_KINDS.includes(k as FrameKind)) as FrameKind[];
      const streamKinds = kinds.filter((k) => STREAM_KINDS.includes(k as StreamPolicy['kind'])) as StreamPolicy['kind'][];
      if (streamKinds.length && !o.stream) throw usageError(`${streamKinds.join(', ')} ${streamKinds.length > 1 ? 'are stream policies' : 'is a stream policy'}: add --stream`);
      const labels = o.labels ? readLabels(o.labels) : undefined;
      if (o.segments && !o.stream) throw usageError('--segments marks the scenes of a stream: add --stream');
      const segments = o.segments ? readLabels(o.segments) : undefined;
      const confidence = o.confidence === undefined ? undefined : share(o.confidence, '--confidence', 0, 1, true);
      const chain = await loadChain(dir);
      try {
        const bar = progressBar(!!process.stderr.isTTY && !o.json);
        const total = readNpyHeader(o.data).rows;
        if (segments && segments.length !== total) throw new OfframpError('data', `${segments.length} segment ids for ${total} frames`, o.segments);
        const { cache, layout } = await captureCache(chain, o.data, labels, bar && ((n) => bar('capture', n, total)));
        let result: TuneResult<Policy>;
        if (!o.stream) result = tune(cache, layout.costs, { maxDrop, heldOut, grid, kinds: frameKinds.length ? frameKinds : undefined });
        else {
          // the per-frame policy a scene change runs on: tuned on the same frames
          const frame = tune(cache, layout.costs, { maxDrop, heldOut, grid, kinds: frameKinds.length ? frameKinds : ['confidence'] });
          const then = frame.chosen.policy.thresholds.some((t) => t !== null) || frame.chosen.policy.kind !== 'confidence' ? [frame.chosen.policy as FramePolicy] : [];
          result = tuneStream(cache, layout.costs, { maxDrop, heldOut, grid: Math.min(grid, 24), then, kinds: streamKinds.length ? streamKinds : undefined, confidence, segments });
        }
        let written: string | undefined;
        if (o.write) {
          const c = result.chosen, f = result.full;
          writeManifestPolicy(chain.dir, {
            rule: c.policy,
            tuned: { maxDrop, labelled: result.labelled, samples: c.held.samples, accuracy: c.held.accuracy, fullAccuracy: f.held.accuracy, meanMacs: c.held.meanMacs, fullMacs: f.held.meanMacs, exitShare: c.held.exitShare },
          });
          written = `${chain.dir}/manifest.json`;
        }
        const report: TuneReport = {
          result, exitNames: [...layout.exits, layout.final], data: o.data, stream: !!o.stream, written,
          stages: chain.manifest.stages.map((s) => ({ index: s.index, macs: s.macs, exits: s.exits })),
        };
        if (o.report) writeAtomic(o.report, tuneHtml(report));
        emit(o.json ? tuneJson(report) : tuneText(report));
      } finally { await chain.release(); }
    });
}

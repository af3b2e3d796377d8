// `offramp tune DIR --data X.npy [--labels y.npy]`: capture every exit once,
// search policies and thresholds on the cache, write the chosen one into the manifest.
import fs from 'node:fs';
import path from 'node:path';
import type { Command } from 'commander';
import { loadChain } from '../run/chain.js';
import { writeManifestPolicy } from '../split/manifest.js';
import { captureCache, chainLayout, readLabels } from '../tune/chain-capture.js';
import { readDataHeader } from '../data/npy.js';
import { refuseInputsAsOutputs, refuseSameRows, splitReads } from './guard.js';
import { progressBar } from './progress.js';
import { tune, TUNE_KINDS, type FrameKind } from '../tune/search.js';
import { tuneStreamThreaded } from '../tune/stream-threads.js';
import { STREAM_KINDS, type FramePolicy, type Policy, type StreamPolicy } from '../policy/policy.js';
import { tuneHtml, tuneJson, tuneText, type TuneReport } from '../report/tune.js';
import type { TuneResult } from '../tune/search.js';
import { OfframpError, usageError } from '../errors.js';
import { CONFIDENCE_RANGE, emit, HELD_OUT_RANGE, inFile, nameList, parseNumber } from './common.js';
import { writeAtomic } from '../util/atomic.js';
import { withFolder } from '../util/folder.js';

/** Files of a build folder that describe its manifest (split/commit.ts): a tuning leaves them as they were. */
const DESCRIBING = ['report.html', 'report.json', 'firmware'];

/**
 * What a tuning of `dir` leaves describing an earlier manifest. In a build --int8 folder the firmware
 * describes DIR/int8's manifest: tuning DIR leaves it current, tuning DIR/int8 leaves DIR/firmware behind.
 */
function staleAfterTuning(dir: string): string[] {
  const nested = path.basename(dir) === 'int8' && fs.existsSync(path.join(dir, '..', 'manifest.json'));
  if (nested) return [path.join(dir, '..', 'firmware')].filter((f) => fs.existsSync(f));
  const int8 = fs.existsSync(path.join(dir, 'int8', 'manifest.json'));
  return DESCRIBING.filter((f) => !(int8 && f === 'firmware')).map((f) => path.join(dir, f)).filter((f) => fs.existsSync(f));
}

/** Threshold candidates per exit: the search grows with its square on two exits, so it is bounded. */
export const MAX_GRID = 1024;

/**
 * Labels as an engineer gives them: one per frame, or with --segments one per scene (in scene order, a scene
 * being a run of one segment id), each frame then taking its scene's label.
 */
function streamLabels(file: string, rows: number, data: string, classes: number, segments?: Int32Array): Int32Array {
  const n = readLabels(file, { classes }).length;
  if (n === rows || !segments) return readLabels(file, { rows, of: data, classes });
  let scenes = rows ? 1 : 0;
  for (let i = 1; i < rows; i++) if (segments[i] !== segments[i - 1]) scenes++;
  if (n !== scenes) throw new OfframpError('data', `${n} labels for ${rows} frames in ${scenes} scenes of ${data}: give one label per frame or one per scene`, file);
  const per = readLabels(file, { classes });
  const out = new Int32Array(rows);
  for (let i = 0, k = 0; i < rows; i++) { if (i > 0 && segments[i] !== segments[i - 1]) k++; out[i] = per[k]; }
  return out;
}

export function tuneCommand(program: Command): void {
  program.command('tune')
    .description('choose the exit policy and thresholds that spend the fewest MACs within an accuracy drop; write it into the manifest')
    .argument('<dir>', 'split folder (or its manifest.json)')
    .requiredOption('--data <file>', '.npy inputs [N, ...] (in temporal order for --stream)')
    .option('--labels <file>', '.npy labels [N]; without them accuracy is agreement with the full model')
    .option('--max-drop <pp>', 'accuracy the policy may lose against the full model, percentage points', '1')
    .option('--policy <list>', `policy kinds to tune: ${[...TUNE_KINDS, ...STREAM_KINDS].join(', ')} (default: all per-frame kinds, or both stream kinds with --stream)`)
    .option('--stream', 'tune the stream policies (difference, agreeing) on the data as an ordered sequence')
    .option('--confidence <C>', 'the promise holds with probability at least C over the draw of the data', '0.95')
    .option('--unlabelled <file>', '.npy extra inputs without labels: they tighten the bound on disagreement with the full model')
    .option('--segments <file>', '.npy scene id per frame [N] (with --stream): a change of id starts a scene; default: runs of the full model\'s answers. With it, --labels may hold one label per scene')
    .option('--held-out <share>', 'share of the data that certifies the choice (the rest searches)', '0.5')
    .option('--grid <n>', 'threshold candidates per exit', '32')
    .option('--report <file>', 'write a self-contained HTML report')
    .option('--json', 'machine-readable result (schema offramp-tune/2)')
    .option('--verbose', 'also print the split, the method, the exit histogram and the fronts')
    .option('--no-write', 'leave the manifest as it is')
    .option('--replace', 'write the tuned policy even over a certified one when this tuning certified nothing')
    .option('--threads <n>', 'threads the capture and the stream search use (default: one per core); the result is the same bits on any count')
    .action(async (dir: string, o: { data: string; labels?: string; maxDrop: string; policy?: string; stream?: boolean; heldOut: string; grid: string; report?: string; json?: boolean; write: boolean; confidence: string; unlabelled?: string; segments?: string; replace?: boolean; verbose?: boolean; threads?: string }) => {
      const maxDrop = parseNumber(o.maxDrop, '--max-drop', { min: 0, max: 100 });
      const confidence = parseNumber(o.confidence, '--confidence', CONFIDENCE_RANGE);
      const heldOut = parseNumber(o.heldOut, '--held-out', HELD_OUT_RANGE);
      const grid = parseNumber(o.grid, '--grid', { int: true, min: 2, max: MAX_GRID });
      const threads = o.threads === undefined ? undefined : parseNumber(o.threads, '--threads', { int: true, min: 1, max: 256 });
      const kinds = o.policy === undefined ? [] : nameList(o.policy, '--policy');
      for (const k of kinds) if (![...TUNE_KINDS, ...STREAM_KINDS].includes(k as never)) throw usageError(`unknown policy kind '${k}' (one of ${[...TUNE_KINDS, ...STREAM_KINDS].join(', ')})`);
      const frameKinds = kinds.filter((k) => TUNE_KINDS.includes(k as FrameKind)) as FrameKind[];
      const streamKinds = kinds.filter((k) => STREAM_KINDS.includes(k as StreamPolicy['kind'])) as StreamPolicy['kind'][];
      if (streamKinds.length && !o.stream) throw usageError(`${streamKinds.join(', ')} ${streamKinds.length > 1 ? 'are stream policies' : 'is a stream policy'}: add --stream`);
      if (o.segments && !o.stream) throw usageError('--segments marks the scenes of a stream: add --stream');
      // A stream's evidence is its scenes; rows without order or labels add none to the scene bound.
      if (o.unlabelled && o.stream) throw usageError('--unlabelled tightens per-frame bounds; a stream is certified on its scenes: give a longer recording (without --labels, the full model\'s answers serve as labels)');
      refuseSameRows(o.data, o.unlabelled);
      const chain = await loadChain(dir);
      try {
        refuseInputsAsOutputs([...splitReads(dir, chain.manifest), { file: o.data, role: 'data' }, { file: o.labels, role: 'labels' },
          { file: o.unlabelled, role: 'unlabelled data' }, { file: o.segments, role: 'segments' }], [o.report]);
        const layout0 = chainLayout(chain.manifest, chain.dir);
        const total = readDataHeader(o.data).rows;
        const segments = o.segments ? readLabels(o.segments, { rows: total, of: o.data, what: 'segment id' }) : undefined;
        const labels = o.labels ? streamLabels(o.labels, total, o.data, layout0.classes, segments) : undefined;
        const bar = progressBar(!!process.stderr.isTTY && !o.json);
        const timings: { phase: string; ms: number }[] = [];
        let t0 = performance.now();
        let searchThreads = 1;
        const lap = (phase: string) => { const now = performance.now(); timings.push({ phase, ms: now - t0 }); t0 = now; };
        // --threads is a cap: a short file stays below it as it would by default
        const captured = await captureCache(chain, o.data, labels, bar && ((n) => bar('capture', n, total)), { maxThreads: threads });
        const { cache, layout } = captured;
        lap(`capture (${captured.threads} thread${captured.threads > 1 ? 's' : ''})`);
        // extra rows without labels: their answers are the full model's, counted only for disagreement
        const unlabelled = o.unlabelled ? (await captureCache(chain, o.unlabelled, undefined, bar && ((n) => bar('unlabelled', n, readDataHeader(o.unlabelled!).rows)), { maxThreads: threads })).cache : undefined;
        if (unlabelled) lap('unlabelled capture');
        // The tuner's own complaints (too few samples in a part) are about the data file.
        const result: TuneResult<Policy> = await inFile(o.data, async () => {
          if (!o.stream) { const r = tune(cache, layout.costs, { maxDrop, heldOut, grid, confidence, unlabelled, kinds: frameKinds.length ? frameKinds : undefined }); lap('search and certification'); return r; }
          // the per-frame policy a scene change runs on: tuned on the same frames
          const frame = tune(cache, layout.costs, { maxDrop, heldOut, grid, confidence, unlabelled, kinds: frameKinds.length ? frameKinds : ['confidence'] });
          lap('per-frame tuning');
          const then = frame.chosen.policy.thresholds.some((t) => t !== null) || frame.chosen.policy.kind !== 'confidence' ? [frame.chosen.policy as FramePolicy] : [];
          return tuneStreamThreaded(cache, layout.costs, { maxDrop, heldOut, grid: Math.min(grid, 24), then, kinds: streamKinds.length ? streamKinds : undefined, confidence, segments,
            threads, onThreads: (n) => { searchThreads = n; },
            onPhase: (phase, ms) => { timings.push({ phase: phase === 'search' ? `stream search (${searchThreads} thread${searchThreads > 1 ? 's' : ''})` : 'certification', ms }); t0 = performance.now(); } });
        });
        let written: string | undefined, manifestNote: string | undefined;
        // A certified policy is never replaced by one that certifies nothing (the full model, or an
        // uncertified setting) unless asked: firmware emitted from it would lose the promise.
        const before = chain.manifest.policy;
        const demotes = before?.guarantee?.certified === true && result.guarantee?.certified !== true;
        if (o.write && demotes && !o.replace) {
          manifestNote = `manifest not changed: ${chain.dir}/manifest.json keeps its certified ${before!.rule && typeof before!.rule === 'object' ? `${(before!.rule as { kind?: string }).kind} ` : ''}policy ` +
            `(drop ≤ ${before!.guarantee!.maxDrop} pp at ${+(before!.guarantee!.confidence * 100).toFixed(4)} % confidence), since this tuning certified nothing; add --replace to write this one over it`;
        } else if (o.write) {
          const c = result.chosen, f = result.full;
          // As a writer of the folder: a split or build writing it now is waited out by refusal, never interleaved.
          withFolder(chain.dir, () => writeManifestPolicy(chain.dir, {
            rule: c.policy,
            tuned: { maxDrop, labelled: result.labelled, samples: c.held.samples, accuracy: c.held.accuracy, fullAccuracy: f.held.accuracy, meanMacs: c.held.meanMacs, fullMacs: f.held.meanMacs, exitShare: c.held.exitShare },
            ...(result.guarantee ? { guarantee: result.guarantee } : {}),
          }, chain.manifest.stages));
          written = `${chain.dir}/manifest.json`;
          const full = c.policy.kind === 'confidence' && c.policy.thresholds.every((t) => t === null);
          if (demotes) manifestNote = `replaced the certified ${(before!.rule as { kind?: string }).kind} policy that was there (--replace)${full ? '; the manifest\'s policy is now the full model: firmware emitted from it never exits early' : ''}`;
          else if (full) manifestNote = 'the manifest\'s policy is now the full model (nothing cheaper was certified): firmware emitted from it never exits early';
        }
        // A build's reports and firmware keep describing the manifest they were made for: say so, with the fix.
        const stale = written ? staleAfterTuning(chain.dir) : [];
        const report: TuneReport = {
          result, exitNames: [...layout.exits, layout.final], data: o.data, stream: !!o.stream, written, manifestNote, stale,
          stages: chain.manifest.stages.map((s) => ({ index: s.index, macs: s.macs, exits: s.exits })),
        };
        if (o.report) writeAtomic(o.report, tuneHtml(report));
        emit(o.json ? tuneJson(report) : tuneText(report, { verbose: o.verbose }));
        // on stderr, beside the progress: the output itself stays the same bits from run to run
        if (o.verbose && !o.json) process.stderr.write(`time: ${timings.map((x) => `${x.phase} ${(x.ms / 1000).toFixed(1)} s`).join(', ')}\n`);
      } finally { await chain.release(); }
    });
}

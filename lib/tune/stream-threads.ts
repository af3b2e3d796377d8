// The stream search on all cores: the settings of a plan (stream.ts planStream) walked over the search part
// by this thread and worker threads, each walking whole groups of settings that compare at the same exit with
// the same distance (they share the distances from each scene's reference, stream-walk.ts). A walk gives the
// same bits on any thread, so the tuning is byte-identical whatever the thread count.
import os from 'node:os';
import { Worker } from 'node:worker_threads';
import { OfframpError } from '../errors.js';
import type { StreamPolicy } from '../policy/index.js';
import { compiledModule } from '../util/shipped.js';
import type { ExitCache, ExitCosts } from './cache.js';
import { softmaxMemoOf, StreamWalk } from './stream-walk.js';
import { bolderOf, formCache, planStream, settingKey, tuneStreamPlanned, type BestForm, type StreamPlan, type StreamTuneOptions, type StreamTuneResult, type Walked } from './stream.js';
import type { SceneShares } from '../certify/scenes.js';

/** What a stream-search worker is given once (stream-worker.ts); lists of settings follow as messages. */
export interface StreamJob {
  samples: number; exits: number; classes: number; logits: Float32Array; labels: Int32Array; labelled: boolean;
  probs: Float32Array; done: Uint8Array;
  idx: Int32Array; ids: Int32Array; full: Int32Array; reach: Float64Array;
  /** 1 − confidence: the level the search part's bound forms are chosen at */
  delta: number;
}

/** Below this many walks a thread of its own costs more (its start, the copy of the cache) than it saves. */
const MIN_WALKS_PER_THREAD = 200;
/** A worker's start (its modules, the copy of the cache, its tables) counts as this share of the first round's walks when groups are dealt. */
const WORKER_START_SHARE = 0.05;

/**
 * tuneStream, with the search's walks spread over `threads` threads (default one per core; 1: this thread
 * only). Without a compiled worker module (sources run without a build), everything runs on this thread.
 */
export async function tuneStreamThreaded(c: ExitCache, costs: ExitCosts, o: StreamTuneOptions & { threads?: number; onThreads?: (n: number) => void } = {}): Promise<StreamTuneResult> {
  if (o.threads !== undefined && !(Number.isInteger(o.threads) && o.threads >= 1)) throw new OfframpError('usage', `threads: a whole number ≥ 1, not ${o.threads}`);
  const plan = planStream(c, costs, o);
  const want = Math.min(o.threads ?? os.availableParallelism(), Math.max(1, Math.floor(plan.settings.length / MIN_WALKS_PER_THREAD)));
  const file = want > 1 ? compiledModule(import.meta.url, 'tune/stream-worker.js') : undefined;
  if (!file) { o.onThreads?.(1); return tuneStreamPlanned(c, o, plan); }
  const walk = new StreamWalk(c, plan.parts.tune, plan.reach, plan.sc.ids, plan.full);
  const pool = new SearchPool(c, plan, walk, want, file);
  try {
    const walked = new Map<string, Walked>();
    await pool.walk(plan.settings.map((s) => s.policy), walked);
    o.onThreads?.(pool.size);
    // the neighbours the search asks for: those of the settings that keep the promise on the search part
    const bolder = plan.settings.map((s) => bolderOf(s.policy)).filter((p, k) => {
      const w = walked.get(settingKey(plan.settings[k].policy))!;
      return w.shares.lost - w.shares.gained <= plan.limit && !walked.has(settingKey(p));
    });
    await pool.walk(bolder, walked);
    return tuneStreamPlanned(c, o, plan, walked, walk);
  } finally { await pool.close(); }
}

/** This thread and size − 1 workers, each keeping its walk, and each group of settings (same distance, same exit) on one of them. */
class SearchPool {
  readonly size: number;
  private readonly workers: Worker[];
  private readonly failure: Promise<never>;
  private readonly threadOf = new Map<string, number>();
  private readonly load: number[];
  private readonly formOf: (s: SceneShares) => BestForm;

  constructor(c: ExitCache, plan: StreamPlan, private readonly here: StreamWalk, threads: number, file: URL) {
    const memo = softmaxMemoOf(c)!;
    const job: StreamJob = {
      samples: c.samples, exits: c.exits, classes: c.classes, logits: c.logits, labels: c.labels, labelled: c.labelled,
      probs: memo.probs, done: memo.done, idx: plan.parts.tune, ids: plan.sc.ids, full: plan.full, reach: plan.reach, delta: plan.delta,
    };
    this.size = threads;
    this.formOf = formCache(plan.delta);
    this.load = new Array<number>(threads).fill(0);
    this.workers = Array.from({ length: threads - 1 }, () => new Worker(file, { workerData: job }));
    this.failure = new Promise<never>((_, reject) => {
      for (const wk of this.workers) wk.on('error', (e) => reject(new OfframpError('runtime', `stream search thread: ${e.message}`)));
    });
    this.failure.catch(() => undefined);
  }

  /** Walk `policies` into `walked`: groups new to the pool go, the largest first, to the least loaded thread. */
  async walk(policies: StreamPolicy[], walked: Map<string, Walked>): Promise<void> {
    const groups = new Map<string, StreamPolicy[]>();
    for (const p of policies) {
      const k = `${p.distance}:${p.kind === 'difference' ? p.exit : '*'}`;
      const g = groups.get(k);
      if (g) g.push(p); else groups.set(k, [p]);
    }
    const share: StreamPolicy[][] = Array.from({ length: this.size }, () => []);
    if (!this.load.some((l) => l !== 0)) for (let t = 1; t < this.size; t++) this.load[t] = Math.round(policies.length * WORKER_START_SHARE);
    for (const [k, g] of [...groups].sort((a, b) => b[1].length - a[1].length)) {
      let t = this.threadOf.get(k);
      if (t === undefined) { t = this.load.indexOf(Math.min(...this.load)); this.threadOf.set(k, t); }
      share[t].push(...g); this.load[t] += g.length;
    }
    const asked = this.workers.map((wk, t) => (share[t + 1].length ? this.ask(wk, share[t + 1]) : Promise.resolve([])));
    // this thread's share while the others walk theirs, bound forms included as theirs are
    for (const p of share[0]) { const r = this.here.eval(p); walked.set(settingKey(p), { ...r, best: this.formOf(r.shares) }); }
    const answers = await Promise.race([Promise.all(asked), this.failure]);
    answers.forEach((ws, t) => ws.forEach((w, k) => walked.set(settingKey(share[t + 1][k]), w)));
  }

  private ask(wk: Worker, policies: StreamPolicy[]): Promise<Walked[]> {
    return new Promise((resolve, reject) => {
      wk.once('message', (m: { walks: Walked[] } | { error: string }) => ('walks' in m ? resolve(m.walks) : reject(new OfframpError('runtime', `stream search thread: ${m.error}`))));
      wk.postMessage(policies);
    });
  }

  async close(): Promise<void> { await Promise.all(this.workers.map((wk) => wk.terminate())); }
}

// One stream-search thread (stream-threads.ts): the caller's cache, part and softmax memo once, then lists of
// settings, each walked over that part and posted back in the same order. The thread keeps its walk (the
// per-frame tables, the distances from each scene's reference) from one list to the next.
import { parentPort, workerData } from 'node:worker_threads';
import type { FramePolicy, StreamPolicy } from '../policy/index.js';
import { seedSoftmax, StreamWalk } from './stream-walk.js';
import { formCache } from './stream.js';
import type { ExitCache } from './cache.js';
import type { StreamJob } from './stream-threads.js';

const w = workerData as StreamJob;
const c: ExitCache = { samples: w.samples, exits: w.exits, classes: w.classes, logits: w.logits, labels: w.labels, labelled: w.labelled };
seedSoftmax(c, { probs: w.probs, done: w.done });
const walk = new StreamWalk(c, w.idx, w.reach, w.ids, w.full);
// the walk keeps `then`'s table per policy object: settings that share one share the object again
const thens = new Map<string, FramePolicy>();
// the bound form too (its bounds cost about what the walk does), once per distinct shares
const formOf = formCache(w.delta);
parentPort!.on('message', (policies: StreamPolicy[]) => {
  try {
    const walks = policies.map((p) => {
      if (p.then) { const k = JSON.stringify(p.then); p.then = thens.get(k) ?? (thens.set(k, p.then), p.then); }
      const r = walk.eval(p);
      return { ...r, best: formOf(r.shares) };
    });
    parentPort!.postMessage({ walks });
  } catch (e) {
    parentPort!.postMessage({ error: e instanceof Error ? e.message : String(e) });
  }
});

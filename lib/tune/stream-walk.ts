// The stream tuner's evaluator: one stream policy walked over the frames of a part in order, giving
// what evalStream and sceneShares give together, bit for bit, with the per-frame work reduced to
// table look-ups. Three things are computed once per part instead of once per setting:
// - each frame's softmax at each exit and its argmax (and the logits' argmax);
// - what `then` does on a frame from a given exit (runFrame has no state across frames);
// - the distance between a frame and a scene's reference at an exit. A scene opened at frame r is
//   tested at r+1, r+2, … in turn until a test fails or a refresh is due, so whatever setting walks
//   from r asks for a prefix of the same sequence d(r+1, r), d(r+2, r), …; it is kept per (distance,
//   exit, r) as far as any setting has asked. Settings differing in threshold or refresh period share
//   most of it (Fashion-MNIST recordings: one distance computed for every ~24 tests).
// The state machine is policy/stream.ts's streamStep written out over those tables; the test
// (test/stream-walk.test.ts) holds the two together on random caches and settings.
import { OfframpError } from '../errors.js';
import { argmax, argmaxOps, chainFor, compareOps, distanceAt, fullModel, runFrame, softmax, softmaxOps, units, DISTANCES, type DistanceKind, type FramePolicy, type StreamPolicy } from '../policy/index.js';
import type { SceneShares } from '../certify/scenes.js';
import { viewOf, type ExitCache } from './cache.js';

const f32 = Math.fround;

/**
 * Each frame's softmax at each exit, computed once per cache (float32 exp is costly in JavaScript,
 * and every candidate policy asks for the same ones): filled on first use, keyed by the cache,
 * which tuning never changes.
 */
const softmaxMemo = new WeakMap<ExitCache, { probs: Float32Array; done: Uint8Array }>();
/** The memo (laid out as the logits), with frame i's softmax at exit k filled in. */
export function probsAt(c: ExitCache, i: number, k: number): Float32Array {
  let m = softmaxMemo.get(c);
  if (!m) { m = { probs: new Float32Array(c.logits.length), done: new Uint8Array(c.samples * (c.exits + 1)) }; softmaxMemo.set(c, m); }
  const at = i * (c.exits + 1) + k;
  if (!m.done[at]) { softmax(c.logits, at * c.classes, c.classes, m.probs.subarray(at * c.classes, (at + 1) * c.classes)); m.done[at] = 1; }
  return m.probs;
}

/** The softmax memo of a cache as filled so far (to hand to another thread), and the filling of one from it. */
export const softmaxMemoOf = (c: ExitCache): { probs: Float32Array; done: Uint8Array } | undefined => softmaxMemo.get(c);
export function seedSoftmax(c: ExitCache, m: { probs: Float32Array; done: Uint8Array }): void {
  if (m.probs.length !== c.logits.length || m.done.length !== c.samples * (c.exits + 1)) throw new OfframpError('usage', 'softmax memo: laid out as another cache');
  softmaxMemo.set(c, m);
}

/** An evaluation as evalStream reports it. */
export interface WalkRun { samples: number; accuracy: number; meanMacs: number; exitShare: number[]; scenes: number; reused: number; correct: number; cost: number }

// Distances kept per (distance, exit): for each reference frame r, d(r+1, r) … d(r+filled[r], r). The first
// NEAR of them sit in one block per r (walks read them in frame order, so they stay in cache); further ones,
// asked for by the scenes that run long, in chunks of CHUNK chained from far[r] through next[].
const NEAR = 8, CHUNK = 16;
class DistMemo {
  near: Float32Array; filled: Int32Array; far: Int32Array; pool: Float32Array; next: Int32Array; chunks = 0;
  constructor(n: number) {
    this.near = new Float32Array(n * NEAR);
    this.filled = new Int32Array(n);
    this.far = new Int32Array(n).fill(-1);
    this.pool = new Float32Array(CHUNK * 256);
    this.next = new Int32Array(256).fill(-1);
  }
  alloc(): number {
    if (this.chunks === this.next.length) {
      const next = new Int32Array(this.next.length * 2).fill(-1), pool = new Float32Array(this.pool.length * 2);
      next.set(this.next); pool.set(this.pool);
      this.next = next; this.pool = pool;
    }
    return this.chunks++;
  }
}

/** What `then` does on frame j (a position in the part) walking from exit `from`, at [j·(E+1) + from]. */
interface ThenTable { exit: Int32Array; label: Int32Array; overhead: Float64Array }

export class StreamWalk {
  readonly n: number;
  private readonly c: ExitCache;
  private readonly idx: Int32Array;
  private readonly reach: Float64Array;
  private readonly probs: Float32Array;
  /** offset of frame j's first exit in the logits (and the softmax memo) */
  private readonly base: Int32Array;
  /** argmax of the softmax and of the logits, at [j·(E+1) + k] */
  private readonly amaxP: Int32Array;
  private readonly amaxZ: Int32Array;
  private readonly lab: Int32Array;
  /** the full model is right on frame j (without labels it is its own reference: always) */
  private readonly fullRight: Uint8Array;
  /** the recording's scene of frame j */
  private readonly sid: Int32Array;
  private readonly sceneCount: number;
  private readonly dist = new Map<string, DistMemo>();
  private readonly thens = new Map<FramePolicy | undefined, ThenTable>();

  /** Frames idx of the cache, in order; `ids` the scene id of every frame of the cache, `full` the full model's answers. */
  constructor(c: ExitCache, idx: Int32Array, reach: Float64Array, ids: Int32Array, full: Int32Array) {
    const n = idx.length, E1 = c.exits + 1, C = c.classes;
    this.c = c; this.idx = idx; this.reach = reach; this.n = n;
    this.base = new Int32Array(n); this.amaxP = new Int32Array(n * E1); this.amaxZ = new Int32Array(n * E1);
    this.lab = new Int32Array(n); this.fullRight = new Uint8Array(n); this.sid = new Int32Array(n);
    let probs: Float32Array = new Float32Array(0), scenes = 0;
    for (let j = 0; j < n; j++) {
      const i = idx[j];
      for (let k = 0; k < E1; k++) {
        probs = probsAt(c, i, k);
        const o = (i * E1 + k) * C;
        this.amaxP[j * E1 + k] = argmax(probs, o, C);
        this.amaxZ[j * E1 + k] = argmax(c.logits, o, C);
      }
      this.base[j] = i * E1 * C;
      this.lab[j] = c.labels[i];
      this.fullRight[j] = full[i] === c.labels[i] ? 1 : 0;
      this.sid[j] = ids[i];
      if (ids[i] !== (j ? ids[idx[j - 1]] : -1)) scenes++;   // as sceneShares counts them
    }
    this.probs = probs;
    this.sceneCount = scenes;
  }

  private memo(kind: DistanceKind, k: number): DistMemo {
    const key = `${kind}:${k}`;
    let m = this.dist.get(key);
    if (!m) this.dist.set(key, (m = new DistMemo(this.n)));
    return m;
  }

  /** `then` on every frame from every exit (runFrame keeps no state across frames). */
  private then(p: FramePolicy | undefined): ThenTable {
    let t = this.thens.get(p);
    if (!t) {
      const c = this.c, E = c.exits, E1 = E + 1, size = this.n * E1, policy = p ?? fullModel(E), ch = chainFor(policy, this.reach, E, c.classes);
      t = { exit: new Int32Array(size), label: new Int32Array(size), overhead: new Float64Array(size) };
      for (let j = 0; j < this.n; j++) {
        const v = viewOf(c, this.idx[j]);
        for (let k = 0; k < E1; k++) {
          const r = runFrame(policy, ch, v, k);
          t.exit[j * E1 + k] = r.exit; t.label[j * E1 + k] = r.label; t.overhead[j * E1 + k] = r.overhead;
        }
      }
      this.thens.set(p, t);
    }
    return t;
  }

  /** The policy over the part: evalStream's figures and sceneShares' shares; `out` receives each frame's answer. */
  eval(p: StreamPolicy, out?: Int32Array): { run: WalkRun; shares: SceneShares } {
    const c = this.c, n = this.n, E = c.exits, E1 = E + 1, C = c.classes;
    if (p.kind !== 'difference' && p.kind !== 'agreeing') throw new OfframpError('usage', `policy.kind: the stream walk takes difference or agreeing, not ${String(p.kind)}`);
    if (!DISTANCES.includes(p.distance)) throw new OfframpError('usage', `policy.distance: one of ${DISTANCES.join(', ')}, not ${String(p.distance)}`);
    if (p.kind === 'difference' && !(Number.isInteger(p.exit) && p.exit! >= 0 && p.exit! <= E)) throw new OfframpError('usage', `policy.exit: a difference policy compares at an exit 0…${E}, not ${p.exit}`);
    const agreeing = p.kind === 'agreeing', kind = p.distance;
    const tau = f32(p.thresholds[0]);
    const hasR = p.refresh !== undefined, Rm1 = hasR ? p.refresh! - 1 : 0;
    const th = this.then(p.then);
    const testOv = units(compareOps(kind, C, agreeing)), smOv = units(softmaxOps(C)), amOv = units(argmaxOps(C)) + 1;
    const openExit = p.exit ?? 0, firstExit = agreeing ? -1 : p.exit!;
    const { probs, base, amaxP, amaxZ, lab, fullRight, sid, reach } = this;
    const thExit = th.exit, thLabel = th.label, thOv = th.overhead;
    const hist = new Int32Array(E1);
    const lostEach = new Float64Array(this.sceneCount), gainedEach = new Float64Array(this.sceneCount);
    // the state of streamStep, and the distances from the reference
    let scene = -1, ks = -1, label = -1, age = 0;
    let m: DistMemo | undefined;
    let near: Float32Array = new Float32Array(0), filled: Int32Array = new Int32Array(0), far = filled, next = filled, pool = near;
    const memos = new Array<DistMemo | undefined>(E1).fill(undefined);
    let correct = 0, cost = 0, reused = 0;
    // sceneShares over the recording's scenes, as the frames go by
    let sn = 0, lost = 0, gained = 0, len = 0, l = 0, g = 0, curId = -1;
    let j = 0;
    while (j < n) {
      // frame j does not reuse: the first frame, a refresh, or a test that failed
      const k = scene >= 0 ? ks : firstExit;
      const forced = hasR && scene >= 0 && age >= Rm1;
      const tested = scene >= 0 && !forced;
      let ov = 0;
      if (tested) ov += testOv;
      let rExit: number, rLab: number, rOv: number;
      if (forced) { rExit = E; rLab = amaxZ[j * E1 + E]; rOv = 0; }
      else { const at = j * E1 + (k > 0 ? k : 0); rExit = thExit[at]; rLab = thLabel[at]; rOv = thOv[at]; }
      ov += rOv;
      const exit = rExit > k ? rExit : k;
      // streamOpen
      let kk = openExit, oo = 0;
      if (agreeing) {
        kk = 0;
        while (kk < rExit && amaxZ[j * E1 + kk] !== rLab) kk++;
        oo += (kk + 1) * amOv;
      }
      if (!(tested && kk === ks)) oo += smOv;
      ov += oo;
      if (kk !== ks || !m) { m = memos[kk] ??= this.memo(kind, kk); near = m.near; filled = m.filled; far = m.far; next = m.next; pool = m.pool; }
      scene++; ks = kk; label = rLab; age = rExit >= E ? 0 : age + 1;
      hist[exit]++; cost += reach[exit] + ov;
      if (out) out[j] = rLab;
      if (sid[j] !== curId) {
        if (len) { const a = l / len, b = g / len; lost += a; gained += b; lostEach[sn] = a; gainedEach[sn] = b; sn++; }
        len = 0; l = 0; g = 0; curId = sid[j];
      }
      len++;
      { const fr = fullRight[j] === 1, pr = rLab === lab[j]; if (pr) correct++; if (fr && !pr) l++; else if (!fr && pr) g++; }

      // the frames after it that reuse the scene's answer, each at exit ks with a test's overhead, until a refresh
      // is due or a test fails (that frame opens the next scene, above)
      const rc = reach[ks] + testOv, off = base[j] + ks * C, fill = filled[j], at0 = j * NEAR;
      let q = j + 1, cur = -1;
      while (q < n) {
        if (hasR && age >= Rm1) break;
        const t = q - j;
        let d: number;
        if (t <= fill) {
          if (t <= NEAR) d = near[at0 + t - 1];
          else {
            const slot = (t - NEAR - 1) & (CHUNK - 1);
            if (slot === 0) cur = t === NEAR + 1 ? far[j] : next[cur];
            d = pool[cur * CHUNK + slot];
          }
        } else {
          d = distanceAt(kind, probs, base[q] + ks * C, probs, off, C);
          if (t <= NEAR) near[at0 + t - 1] = d;
          else {
            const slot = (t - NEAR - 1) & (CHUNK - 1);
            if (slot === 0) {
              const nc = m.alloc();
              next = m.next; pool = m.pool;
              if (t === NEAR + 1) far[j] = nc; else next[cur] = nc;
              cur = nc;
            }
            pool[cur * CHUNK + slot] = d;
          }
          filled[j] = t;
        }
        if (!(d < tau && (!agreeing || amaxP[q * E1 + ks] === label))) break;
        age = ks >= E ? 0 : age + 1;
        cost += rc;
        if (out) out[q] = label;
        if (sid[q] !== curId) {
          if (len) { const a = l / len, b = g / len; lost += a; gained += b; lostEach[sn] = a; gainedEach[sn] = b; sn++; }
          len = 0; l = 0; g = 0; curId = sid[q];
        }
        len++;
        const fr = fullRight[q] === 1, pr = label === lab[q];
        if (pr) correct++;
        if (fr && !pr) l++; else if (!fr && pr) g++;
        q++;
      }
      hist[ks] += q - j - 1; reused += q - j - 1;
      j = q;
    }
    if (len) { const a = l / len, b = g / len; lost += a; gained += b; lostEach[sn] = a; gainedEach[sn] = b; sn++; }
    const run: WalkRun = { samples: n, accuracy: n ? correct / n : 0, meanMacs: n ? cost / n : 0, exitShare: Array.from(hist, (h) => (n ? h / n : 0)), scenes: scene + 1, reused, correct, cost };
    return { run, shares: { n: sn, lost: sn ? lost / sn : 0, gained: sn ? gained / sn : 0, labelled: c.labelled, lostEach, gainedEach } };
  }
}

// The staged runner: a split's stages in onnxruntime, one after another. Handover
// tensors go from one session's outputs to the next one's feeds as they are (no copy
// on our side). Stages run on the caller's turn (openSyncSession): for a model of a few
// million MACs the per-call cost of the awaited session API outweighed a stage's work.
import fs from 'node:fs';
import path from 'node:path';
import crypto from 'node:crypto';
import { openSyncSession, type OrtTensor, type SyncSession } from '../runtime/ort.js';
import * as ort from 'onnxruntime-node';
import { MANIFEST_FILE, MANIFEST_SCHEMA, type Manifest } from '../split/manifest.js';
import { OfframpError } from '../errors.js';

export interface ExitPoint { name: string; stage: number; value: OrtTensor }
export interface RunOptions {
  /** Asked after each stage that makes an exit output; true stops the chain there. */
  policy?: (exit: ExitPoint) => boolean;
}
export interface ChainResult {
  /** source-model outputs computed (all of them unless the chain stopped at an exit) */
  outputs: Record<string, OrtTensor>;
  /** the exit output the chain stopped at, or null if it ran to the end */
  exit: string | null;
  /** MACs of the stages that ran */
  macs: number;
  stagesRun: number;
}
export interface BatchOptions {
  /** Asked for each frame still running after each stage that makes an exit output; true stops that frame there. */
  policy?: (exit: ExitPoint, frame: number) => boolean;
}
export interface Chain {
  manifest: Manifest;
  dir: string;
  run(inputs: Record<string, OrtTensor>, options?: RunOptions): Promise<ChainResult>;
  /**
   * `n` frames stacked along the first dim of every input, each frame's result exactly as `run` gives
   * it (outputs are batch-1 views). Stage by stage on the frames still running: a frame the policy stops
   * leaves the batch. Runs frame by frame where the stage files fix the batch, or where batching was
   * found not to reproduce batch 1 bit for bit (checked on the first call).
   */
  runBatch(inputs: Record<string, OrtTensor>, n: number, options?: BatchOptions): Promise<ChainResult[]>;
  /** frames per runBatch call that keep a stage's activations near 16 MiB (1 if the files fix the batch) */
  readonly batchFrames: number;
  release(): Promise<void>;
}

/** Read and check a manifest: a file, or a folder holding manifest.json. */
export function readManifest(where: string): { manifest: Manifest; file: string } {
  const file = fs.existsSync(where) && fs.statSync(where).isDirectory() ? path.join(where, MANIFEST_FILE) : where;
  let m: Manifest;
  try { m = JSON.parse(fs.readFileSync(file, 'utf8')); } catch (e) {
    const code = (e as NodeJS.ErrnoException).code;
    throw new OfframpError('io', code === 'ENOENT' ? 'no manifest here (run offramp split first)' : `not a readable manifest: ${(e as Error).message}`, file);
  }
  if (m?.schema !== MANIFEST_SCHEMA) throw new OfframpError('decode', `manifest schema is '${m?.schema}', expected '${MANIFEST_SCHEMA}'`, file);
  return { manifest: m, file };
}

export async function loadChain(manifestPath: string): Promise<Chain> {
  const { manifest, file } = readManifest(manifestPath);
  const dir = path.dirname(file);
  const sessions: SyncSession[] = [];
  try {
    for (const s of manifest.stages) {
      const stageFile = path.join(dir, s.file);
      let bytes: Buffer;
      try { bytes = fs.readFileSync(stageFile); } catch { throw new OfframpError('io', 'stage file is missing', stageFile); }
      if (crypto.createHash('sha256').update(bytes).digest('hex') !== s.sha256) throw new OfframpError('io', 'stage file changed since the split (SHA-256 differs from the manifest)', stageFile);
      sessions.push(openSyncSession(bytes, stageFile));
    }
  } catch (e) { for (const x of sessions) x.release(); throw e; }
  const files = manifest.stages.map((s) => path.join(dir, s.file));

  const feedsOf = (s: Manifest['stages'][number], get: (name: string) => OrtTensor | undefined) => {
    const feeds: Record<string, OrtTensor> = {};
    for (const i of s.inputs) {
      const t = get(i.name);
      if (!t) throw new OfframpError('runtime', `stage ${s.index} needs '${i.name}'${i.from === 'input' ? ', a model input not given' : ''}`, files[s.index]);
      feeds[i.name] = t;
    }
    return feeds;
  };

  const runOne = (inputs: Record<string, OrtTensor>, options: RunOptions = {}): ChainResult => {
    const env = new Map<string, OrtTensor>(Object.entries(inputs));
    let macs = 0;
    const collect = () => Object.fromEntries(manifest.outputs.filter((o) => env.has(o.name)).map((o) => [o.name, env.get(o.name)!]));
    for (const s of manifest.stages) {
      const out = sessions[s.index].run(feedsOf(s, (n) => env.get(n)));
      for (const k in out) env.set(k, out[k]);
      macs += s.macs;
      if (options.policy) for (const e of s.exits) {
        if (options.policy({ name: e, stage: s.index, value: env.get(e)! })) return { outputs: collect(), exit: e, macs, stagesRun: s.index + 1 };
      }
    }
    return { outputs: collect(), exit: null, macs, stagesRun: manifest.stages.length };
  };

  // Batched: every value keeps the frames its rows belong to. A stage reads its inputs gathered down to
  // the frames still running; results are views of the rows, taken when a frame stops or at the end.
  const runStacked = (inputs: Record<string, OrtTensor>, n: number, options: BatchOptions): ChainResult[] => {
    const all = Array.from({ length: n }, (_, f) => f);
    const env = new Map<string, { t: OrtTensor; rows: number[] }>(Object.entries(inputs).map(([k, t]) => [k, { t, rows: all }]));
    const gathered = new Map<string, OrtTensor>();
    const res: ChainResult[] = new Array(n);
    const collect = (f: number) => {
      const outputs: Record<string, OrtTensor> = {};
      for (const o of manifest.outputs) {
        const v = env.get(o.name), j = v ? v.rows.indexOf(f) : -1;
        if (j >= 0) outputs[o.name] = rowOf(v!.t, j, v!.rows.length);
      }
      return outputs;
    };
    let active = all, macs = 0;
    for (const s of manifest.stages) {
      const feeds = feedsOf(s, (name) => {
        const v = env.get(name);
        if (!v || v.rows === active) return v?.t;
        let g = gathered.get(name);
        if (!g) gathered.set(name, (g = gatherRows(v.t, v.rows, active)));
        return g;
      });
      const out = sessions[s.index].run(feeds);
      for (const k in out) env.set(k, { t: out[k], rows: active });
      macs += s.macs;
      if (!options.policy || !s.exits.length) continue;
      const still: number[] = [];
      active.forEach((f, j) => {
        const stop = s.exits.find((e) => options.policy!({ name: e, stage: s.index, value: rowOf(env.get(e)!.t, j, active.length) }, f));
        if (stop === undefined) still.push(f);
        else res[f] = { outputs: collect(f), exit: stop, macs, stagesRun: s.index + 1 };
      });
      if (still.length < active.length) { active = still; gathered.clear(); }
      if (!active.length) break;
    }
    for (const f of active) res[f] = { outputs: collect(f), exit: null, macs, stagesRun: manifest.stages.length };
    return res;
  };

  const perFrame = (inputs: Record<string, OrtTensor>, n: number, options: BatchOptions) =>
    Array.from({ length: n }, (_, f) => runOne(
      Object.fromEntries(Object.entries(inputs).map(([k, t]) => [k, rowOf(t, f, n)])),
      options.policy && { policy: (e) => options.policy!(e, f) }));

  // Batching is used where every stage file takes any batch, and only once the first batch has come out
  // bit for bit as batch 1 does: a kernel may choose another algorithm by batch size, and outputs must
  // not change with how frames were grouped.
  let stacked = sessions.every((x) => x.anyBatch.inputs.every(Boolean) && x.anyBatch.outputs.every(Boolean));
  let probed = false;
  const peak = Math.max(1, ...manifest.stages.map((s) => s.peakActivationBytes));
  const batchFrames = stacked ? Math.max(1, Math.min(64, Math.floor(16 * 2 ** 20 / peak))) : 1;

  const runBatch = async (inputs: Record<string, OrtTensor>, n: number, options: BatchOptions = {}): Promise<ChainResult[]> => {
    for (const [k, t] of Object.entries(inputs)) if (t.dims[0] !== n) throw new OfframpError('usage', `input '${k}' has ${t.dims[0]} rows, ${n} frames given`);
    if (!stacked || n === 1) return perFrame(inputs, n, options);
    if (!probed) {
      probed = true;
      const a = runStacked(inputs, n, {}), b = perFrame(inputs, n, {});
      stacked = a.every((r, f) => Object.keys(b[f].outputs).every((k) => sameBits(r.outputs[k], b[f].outputs[k])));
      if (!stacked) return perFrame(inputs, n, options);
    }
    return runStacked(inputs, n, options);
  };

  return {
    manifest, dir, runBatch,
    get batchFrames() { return stacked ? batchFrames : 1; },
    run: async (inputs, options) => runOne(inputs, options),
    release: async () => { for (const x of sessions) x.release(); },
  };
}

type Rows = ArrayLike<unknown> & { subarray?(a: number, b: number): Rows; slice(a: number, b: number): Rows };

/** Row `j` of a tensor holding `n` rows, as a batch-1 tensor over the same memory where it can be. */
function rowOf(t: OrtTensor, j: number, n: number): OrtTensor {
  if (n === 1) return t;
  const d = t.data as unknown as Rows, per = d.length / n;
  const row = d.subarray ? d.subarray(j * per, (j + 1) * per) : d.slice(j * per, (j + 1) * per);
  return new ort.Tensor(t.type as 'float32', row as unknown as Float32Array, [1, ...t.dims.slice(1)]);
}

/** The rows of `t` (one per frame of `had`) for the frames `want`, in that order. */
function gatherRows(t: OrtTensor, had: number[], want: number[]): OrtTensor {
  const per = t.data.length / had.length;
  const pick = (f: number) => had.indexOf(f) * per;
  let out: unknown;
  if (Array.isArray(t.data)) out = want.flatMap((f) => (t.data as string[]).slice(pick(f), pick(f) + per));
  else {
    const d = t.data as Float32Array, o = new (d.constructor as Float32ArrayConstructor)(want.length * per);
    want.forEach((f, j) => o.set(d.subarray(pick(f), pick(f) + per), j * per));
    out = o;
  }
  return new ort.Tensor(t.type as 'float32', out as Float32Array, [want.length, ...t.dims.slice(1)]);
}

function sameBits(a: OrtTensor | undefined, b: OrtTensor | undefined): boolean {
  if (!a || !b || a.type !== b.type || a.dims.join() !== b.dims.join()) return false;
  const x = a.data as unknown, y = b.data as unknown;
  if (Array.isArray(x)) return x.every((v, i) => v === (y as unknown[])[i]);
  const bx = x as ArrayBufferView, by = y as ArrayBufferView;
  if (bx.byteLength !== by.byteLength) return false;
  const u = new Uint8Array(bx.buffer, bx.byteOffset, bx.byteLength), v = new Uint8Array(by.buffer, by.byteOffset, by.byteLength);
  for (let i = 0; i < u.length; i++) if (u[i] !== v[i]) return false;
  return true;
}

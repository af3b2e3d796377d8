// The staged runner: a split's stages in onnxruntime, one after another. Handover
// tensors go from one session's outputs to the next one's feeds as they are (no copy
// on our side). Stages run on the caller's turn (openSyncSession): for a model of a few
// million MACs the per-call cost of the awaited session API outweighed a stage's work.
import fs from 'node:fs';
import path from 'node:path';
import crypto from 'node:crypto';
import { openSyncSession, tensorFromData, type Optimization, type OrtTensor, type SyncSession } from '../runtime/ort.js';
import { chainFor, checkPolicy, decide, frameStart, isStream, type FramePolicy, type Policy } from '../policy/policy.js';
import { dtypeByName } from '../onnx/dtype.js';
import type { Manifest } from '../split/manifest.js';
import { readManifestFile } from '../split/read.js';
import { readRegular } from '../util/fsx.js';
import { OfframpError } from '../errors.js';

export interface ExitPoint { name: string; stage: number; value: OrtTensor }
export interface RunOptions {
  /**
   * Asked after each stage that makes an exit output; true stops the chain there. Or a per-frame policy
   * object as the manifest keeps it (`manifest.policy.rule`), decided as tune and replay decide it.
   */
  policy?: ((exit: ExitPoint) => boolean) | FramePolicy;
}
/** A chain input: an onnxruntime tensor, or the values of one sample (batch 1, the manifest's shape). */
export type ChainInput = OrtTensor | Float32Array | Int32Array | BigInt64Array | Uint8Array | Int8Array | number[];
export interface ChainResult {
  /** source-model outputs computed (all of them unless the chain stopped at an exit) */
  outputs: Record<string, OrtTensor>;
  /** the exit output the chain stopped at, or null if it ran to the end */
  exit: string | null;
  /** MACs of the stages that ran */
  macs: number;
  stagesRun: number;
}
export interface Chain {
  manifest: Manifest;
  dir: string;
  /** onnxruntime's graph optimisation the stages run at (runtime/ort.ts) */
  optimization: Optimization;
  run(inputs: Record<string, ChainInput>, options?: RunOptions): Promise<ChainResult>;
  release(): Promise<void>;
}

/** Read and check a manifest: a file, or a folder holding manifest.json. */
export function readManifest(where: string): { manifest: Manifest; file: string } {
  const { manifest, file } = readManifestFile(where);
  return { manifest, file };
}

/** Open every stage of a split (a folder or its manifest.json), each stage file checked against the manifest's SHA-256. `run` stops at the first exit `policy` accepts. */
export async function loadChain(manifestPath: string, o: { optimization?: Optimization } = {}): Promise<Chain> {
  const { manifest, file } = readManifest(manifestPath);
  return openChain(manifest, file, o);
}

/** The chain of a manifest already read from `file` (a worker thread opens its own from the one the caller read). */
export function openChain(manifest: Manifest, file: string, o: { optimization?: Optimization } = {}): Chain {
  const optimization = o.optimization ?? 'all';
  const dir = path.dirname(file);
  const sessions: SyncSession[] = [];
  try {
    for (const s of manifest.stages) {
      const stageFile = path.join(dir, s.file);
      let bytes: Buffer;
      if (!fs.existsSync(stageFile)) throw new OfframpError('io', 'stage file is missing', stageFile);
      bytes = readRegular(stageFile, 'stage');
      if (crypto.createHash('sha256').update(bytes).digest('hex') !== s.sha256) throw new OfframpError('io', 'stage file changed since the split (SHA-256 differs from the manifest)', stageFile);
      sessions.push(openSyncSession(bytes, stageFile, optimization));
    }
  } catch (e) { for (const x of sessions) x.release(); throw e; }
  const files = manifest.stages.map((s) => path.join(dir, s.file));

  const runOne = (inputs: Record<string, OrtTensor>, options: { policy?: (e: ExitPoint) => boolean } = {}): ChainResult => {
    const env = new Map<string, OrtTensor>(Object.entries(inputs));
    let macs = 0;
    const collect = () => Object.fromEntries(manifest.outputs.filter((o) => env.has(o.name)).map((o) => [o.name, env.get(o.name)!]));
    for (const s of manifest.stages) {
      const feeds: Record<string, OrtTensor> = {};
      for (const i of s.inputs) {
        const t = env.get(i.name);
        if (!t) throw new OfframpError('runtime', `stage ${s.index} needs '${i.name}'${i.from === 'input' ? ', a model input not given' : ''}`, files[s.index]);
        feeds[i.name] = t;
      }
      const out = sessions[s.index].run(feeds);
      for (const k in out) env.set(k, out[k]);
      macs += s.macs;
      if (options.policy) for (const e of s.exits) {
        if (options.policy({ name: e, stage: s.index, value: env.get(e)! })) return { outputs: collect(), exit: e, macs, stagesRun: s.index + 1 };
      }
    }
    return { outputs: collect(), exit: null, macs, stagesRun: manifest.stages.length };
  };

  const usage = (msg: string) => new OfframpError('usage', msg, file);
  const exitNames = manifest.stages.flatMap((s) => s.exits);
  const exitStage = manifest.stages.flatMap((s) => s.exits.map(() => s.index));
  /** Stage MACs up to each exit, the final output last: what a budget policy's cap is worked out on. */
  const reach = [...exitStage, manifest.stages.length - 1].map((k) => manifest.stages.slice(0, k + 1).reduce((a, s) => a + s.macs, 0));
  /** A policy object as a per-exit callback; the state (patience) is one run's. */
  const asCallback = (p: unknown): ((e: ExitPoint) => boolean) => {
    const policy: Policy = checkPolicy(p, exitNames.length, 'options.policy');
    if (isStream(policy)) throw usage(`options.policy: a ${policy.kind} policy decides over frames in order (tune/replay.ts replays it); run() takes a per-frame policy or a callback`);
    const state = frameStart();
    let ch: ReturnType<typeof chainFor> | undefined;
    return (e) => {
      if (e.value.type !== 'float32') throw new OfframpError('runtime', `exit '${e.name}' is ${e.value.type}, not float32 logits`, file);
      const z = e.value.data as Float32Array;
      ch ??= chainFor(policy as FramePolicy, reach, exitNames.length, z.length);
      return decide(policy as FramePolicy, state, exitNames.indexOf(e.name), z, 0, ch);
    };
  };
  /** Inputs checked and made tensors: every model input, as a tensor or one sample's values. */
  const feedsOf = (inputs: unknown): Record<string, OrtTensor> => {
    if (!inputs || typeof inputs !== 'object' || Array.isArray(inputs)) throw usage(`run() takes { ${manifest.inputs.map((t) => `'${t.name}': values`).join(', ')} }, not ${inputs === undefined ? 'nothing' : JSON.stringify(inputs)?.slice(0, 40) ?? typeof inputs}`);
    const out: Record<string, OrtTensor> = {};
    for (const t of manifest.inputs) {
      const v = (inputs as Record<string, unknown>)[t.name];
      if (v === undefined) continue; // the stage that needs it says so (stage K needs 'x', a model input not given)
      if (ArrayBuffer.isView(v) || Array.isArray(v)) {
        const shape = t.shape.map((d, i) => (typeof d === 'number' ? d : i === 0 ? 1 : NaN));
        if (shape.some((d) => !Number.isInteger(d))) throw usage(`run(): input '${t.name}' has a symbolic dim beyond the batch ([${t.shape.join(', ')}]): give a tensor`);
        const n = shape.reduce((a, d) => a * d, 1);
        const dtype = dtypeByName(t.dtype)?.id ?? 1;
        const data = Array.isArray(v) ? Float32Array.from(v as number[]) : (v as ArrayBufferView);
        const len = (data as unknown as { length: number }).length;
        if (len !== n) throw usage(`run(): input '${t.name}' takes ${n} values ([${shape.join(', ')}]), got ${len}`);
        out[t.name] = tensorFromData(dtype, shape, data);
      } else if (typeof v === 'object' && v !== null && 'dims' in v && 'type' in v) out[t.name] = v as OrtTensor;
      else throw usage(`run(): input '${t.name}' is neither a tensor nor an array of values`);
    }
    return out;
  };

  return {
    manifest, dir, optimization,
    run: async (inputs, options) => {
      if (options !== undefined && (typeof options !== 'object' || options === null)) throw usage('run(): options must be an object { policy }');
      const p = options?.policy;
      if (p !== undefined && typeof p !== 'function' && (typeof p !== 'object' || p === null)) throw usage('options.policy is a policy object (manifest.policy.rule) or a function of the exit');
      return runOne(feedsOf(inputs), { policy: p === undefined ? undefined : typeof p === 'function' ? p : asCallback(p) });
    },
    release: async () => { for (const x of sessions) x.release(); },
  };
}

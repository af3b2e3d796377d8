// The staged runner: a split's stages in onnxruntime, one after another. Handover
// tensors go from one session's outputs to the next one's feeds as they are (no copy
// on our side). Stages run on the caller's turn (openSyncSession): for a model of a few
// million MACs the per-call cost of the awaited session API outweighed a stage's work.
import fs from 'node:fs';
import path from 'node:path';
import crypto from 'node:crypto';
import { openSyncSession, type OrtTensor, type SyncSession } from '../runtime/ort.js';
import type { Manifest } from '../split/manifest.js';
import { readManifestFile } from '../split/read.js';
import { readRegular } from '../util/fsx.js';
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
export interface Chain {
  manifest: Manifest;
  dir: string;
  run(inputs: Record<string, OrtTensor>, options?: RunOptions): Promise<ChainResult>;
  release(): Promise<void>;
}

/** Read and check a manifest: a file, or a folder holding manifest.json. */
export function readManifest(where: string): { manifest: Manifest; file: string } {
  const { manifest, file } = readManifestFile(where);
  return { manifest, file };
}

/** Open every stage of a split (a folder or its manifest.json), each stage file checked against the manifest's SHA-256. `run` stops at the first exit `policy` accepts. */
export async function loadChain(manifestPath: string): Promise<Chain> {
  const { manifest, file } = readManifest(manifestPath);
  const dir = path.dirname(file);
  const sessions: SyncSession[] = [];
  try {
    for (const s of manifest.stages) {
      const stageFile = path.join(dir, s.file);
      let bytes: Buffer;
      if (!fs.existsSync(stageFile)) throw new OfframpError('io', 'stage file is missing', stageFile);
      bytes = readRegular(stageFile, 'stage');
      if (crypto.createHash('sha256').update(bytes).digest('hex') !== s.sha256) throw new OfframpError('io', 'stage file changed since the split (SHA-256 differs from the manifest)', stageFile);
      sessions.push(openSyncSession(bytes, stageFile));
    }
  } catch (e) { for (const x of sessions) x.release(); throw e; }
  const files = manifest.stages.map((s) => path.join(dir, s.file));

  const runOne = (inputs: Record<string, OrtTensor>, options: RunOptions = {}): ChainResult => {
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

  return {
    manifest, dir,
    run: async (inputs, options) => runOne(inputs, options),
    release: async () => { for (const x of sessions) x.release(); },
  };
}

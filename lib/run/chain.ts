// The staged runner: a split's stages in onnxruntime, one after another. Handover
// tensors go from one session's outputs to the next one's feeds as they are.
import fs from 'node:fs';
import path from 'node:path';
import crypto from 'node:crypto';
import { openSession, runSession, type OrtTensor, type Session } from '../runtime/ort.js';
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

export async function loadChain(manifestPath: string): Promise<Chain> {
  const { manifest, file } = readManifest(manifestPath);
  const dir = path.dirname(file);
  const sessions: Session[] = [];
  try {
    for (const s of manifest.stages) {
      const stageFile = path.join(dir, s.file);
      let bytes: Buffer;
      if (!fs.existsSync(stageFile)) throw new OfframpError('io', 'stage file is missing', stageFile);
      bytes = readRegular(stageFile, 'stage');
      if (crypto.createHash('sha256').update(bytes).digest('hex') !== s.sha256) throw new OfframpError('io', 'stage file changed since the split (SHA-256 differs from the manifest)', stageFile);
      sessions.push(await openSession(bytes, stageFile));
    }
  } catch (e) { await Promise.all(sessions.map((x) => x.release())); throw e; }

  const run = async (inputs: Record<string, OrtTensor>, options: RunOptions = {}): Promise<ChainResult> => {
    const env = new Map<string, OrtTensor>(Object.entries(inputs));
    let macs = 0;
    const collect = () => Object.fromEntries(manifest.outputs.filter((o) => env.has(o.name)).map((o) => [o.name, env.get(o.name)!]));
    for (const s of manifest.stages) {
      const feeds: Record<string, OrtTensor> = {};
      for (const i of s.inputs) {
        const t = env.get(i.name);
        if (!t) throw new OfframpError('runtime', `stage ${s.index} needs '${i.name}'${i.from === 'input' ? ', a model input not given' : ''}`, path.join(dir, s.file));
        feeds[i.name] = t;
      }
      const out = await runSession(sessions[s.index], feeds, path.join(dir, s.file));
      for (const [k, v] of Object.entries(out)) env.set(k, v);
      macs += s.macs;
      if (options.policy) for (const e of s.exits) {
        if (options.policy({ name: e, stage: s.index, value: env.get(e)! })) return { outputs: collect(), exit: e, macs, stagesRun: s.index + 1 };
      }
    }
    return { outputs: collect(), exit: null, macs, stagesRun: manifest.stages.length };
  };
  return { manifest, dir, run, release: async () => { await Promise.all(sessions.map((x) => x.release())); } };
}

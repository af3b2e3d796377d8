// emit-c on disk: read the manifest once (its bytes are what the banners'
// sha256 names), take its policy unless one is given, write every C file
// (the generated ones and the library's fixed ones) all or none.
import path from 'node:path';
import { OfframpError } from '../errors.js';
import type { Policy } from '../policy/index.js';
import { readManifestFile } from '../split/read.js';
import { writeAllAtomic } from '../util/atomic.js';
import { refuseForeignC } from '../util/own-c.js';
import { sha256, verifyStageFiles } from '../split/commit.js';
import type { Manifest } from '../split/manifest.js';
import { emitC, type EmitCOutput } from './c.js';
import { checkQuantizedChain } from './quant-check.js';

export interface WriteCOptions {
  /** overrides the manifest's policy; `from` says where it came from (banner), `file` names it in errors */
  policy?: { value: unknown; from: string; file?: string };
}

/** What the C for a folder rests on: its manifest (the bytes the banners' SHA-256 names), the policy, the decision files. */
export interface DecisionC {
  manifest: Manifest; file: string; manifestName: string; manifestSha256: string;
  policy: Policy; policyFrom: string; out: EmitCOutput;
}

/**
 * The decision files for a split folder (or its manifest.json) and what they rest on, not yet written:
 * the manifest read once, its policy unless one is given, its stage files checked. `require` refuses a
 * manifest before anything else is looked at (the firmware writer's "not a quantized folder").
 */
export function decisionC(where: string, outDir: string, o: WriteCOptions & { require?: (m: Manifest, file: string) => void } = {}): DecisionC {
  const { manifest, file, bytes } = readManifestFile(where);
  o.require?.(manifest, file);
  const chosen = o.policy ?? (manifest.policy?.rule !== undefined ? { value: manifest.policy.rule, from: 'the manifest' } : undefined);
  if (!chosen) throw new OfframpError('usage', 'the manifest holds no policy yet (run offramp tune, or give --policy)', file);

  // The C describes these stage files: they must be the ones the manifest records (as check and replay insist),
  // and a quantized manifest's exit parameters must be those its stage files dequantize with.
  verifyStageFiles(manifest, file);
  checkQuantizedChain(manifest, file);
  const manifestName = path.relative(path.resolve(outDir), path.resolve(file)).split(path.sep).join('/');
  const manifestSha256 = sha256(bytes);
  const out = emitC({
    manifest, manifestName, manifestSha256,
    policy: chosen.value as Policy, policyFrom: chosen.from, policyFile: chosen === o.policy ? o.policy.file ?? '--policy' : file,
  }, file);
  return { manifest, file, manifestName, manifestSha256, policy: chosen.value as Policy, policyFrom: chosen.from, out };
}

/** `where`: a split folder or its manifest.json. Returns what was written. */
export function writeC(where: string, outDir: string, o: WriteCOptions = {}): EmitCOutput & { written: string[]; policyFrom: string } {
  const d = decisionC(where, outDir, o);
  // Every file or none (each to a temporary beside it, then all renamed); OUTDIR is made only when they are written.
  const written = d.out.files.map((f) => path.join(outDir, f.name));
  refuseForeignC(written);
  writeAllAtomic(d.out.files.map((f, k) => ({ file: written[k], data: f.text })));
  return { ...d.out, written, policyFrom: d.policyFrom };
}

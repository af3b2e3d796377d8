// emit-c on disk: read the manifest once (its bytes are what the banner's
// sha256 names), take its policy unless one is given, write both files.
import crypto from 'node:crypto';
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import type { Policy } from '../policy/index.js';
import { readManifestFile } from '../split/read.js';
import { writeAllAtomic } from '../util/atomic.js';
import { verifyStageFiles } from '../split/commit.js';
import { emitC, type EmitCOutput } from './c.js';
import { checkQuantizedChain } from './quant-check.js';

export interface WriteCOptions {
  /** overrides the manifest's policy; `from` says where it came from (banner), `file` names it in errors */
  policy?: { value: unknown; from: string; file?: string };
}

/** `where`: a split folder or its manifest.json. Returns what was written. */
export function writeC(where: string, outDir: string, o: WriteCOptions = {}): EmitCOutput & { written: string[]; policyFrom: string } {
  const { manifest, file, bytes } = readManifestFile(where);
  const chosen = o.policy ?? (manifest.policy?.rule !== undefined ? { value: manifest.policy.rule, from: 'the manifest' } : undefined);
  if (!chosen) throw new OfframpError('usage', 'the manifest holds no policy yet (run offramp tune, or give --policy)', file);

  // The C describes these stage files: they must be the ones the manifest records (as check and replay insist).
  verifyStageFiles(manifest, file);
  checkQuantizedChain(manifest, file);
  const manifestName = path.relative(path.resolve(outDir), path.resolve(file)).split(path.sep).join('/');
  const out = emitC({
    manifest, manifestName, manifestSha256: crypto.createHash('sha256').update(bytes).digest('hex'),
    policy: chosen.value as Policy, policyFrom: chosen.from, policyFile: chosen === o.policy ? o.policy.file ?? '--policy' : file,
  }, file);
  // Both files or neither; OUTDIR is made only when they are written.
  const written = out.files.map((f) => path.join(outDir, f.name));
  writeAllAtomic(out.files.map((f, k) => ({ file: written[k], data: f.text })));
  return { ...out, written, policyFrom: chosen.from };
}

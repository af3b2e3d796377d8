// emit-c on a quantized folder: the whole int8 network as a C99 library. The fixed sources
// (kernels, the step walker, the entry points) are copied as they are in the package; the
// model's tables and the policy's constants are generated. Every file goes in, or none does.
import crypto from 'node:crypto';
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { OfframpError } from '../errors.js';
import type { Policy } from '../policy/index.js';
import { readManifestFile } from '../split/read.js';
import { verifyStageFiles } from '../split/commit.js';
import { writeAllAtomic } from '../util/atomic.js';
import { emitC } from '../emit/c.js';
import { checkQuantizedChain } from '../emit/quant-check.js';
import type { ChainTable } from '../emit/table.js';
import { lowerChain } from './lower.js';
import { netTables } from './tables.js';
import type { Program } from './program.js';

/** Where the fixed C sources are: lib/kernels and lib/firmware/c, from the sources or from dist/. */
export function firmwareSourceDirs(): string[] {
  let d = path.dirname(fileURLToPath(import.meta.url));
  for (let i = 0; i < 5; i++, d = path.dirname(d)) {
    const k = path.join(d, 'lib', 'kernels');
    if (fs.existsSync(path.join(k, 'offramp_kernels.h'))) return [k, path.join(d, 'lib', 'firmware', 'c')];
  }
  throw new OfframpError('io', 'the firmware C sources (lib/kernels, lib/firmware/c) are missing from this installation');
}

/** The fixed C files, by name, in a fixed order. */
export function fixedSources(): { name: string; text: string }[] {
  return firmwareSourceDirs().flatMap((dir) => fs.readdirSync(dir).filter((f) => /^offramp_\w+\.[ch]$/.test(f)).sort()
    .map((name) => ({ name, text: fs.readFileSync(path.join(dir, name), 'utf8') })));
}

export interface FirmwareOptions {
  /** overrides the manifest's policy; `from` says where it came from (banner), `file` names it in errors */
  policy?: { value: unknown; from: string; file?: string };
}
export interface FirmwareResult { program: Program; table: ChainTable; written: string[]; policyFrom: string; policy: Policy; files: { name: string; text: string }[] }

/** The files of the library for a quantized folder (or its manifest), not yet written. */
export function firmwareFiles(where: string, outDir: string, o: FirmwareOptions = {}): Omit<FirmwareResult, 'written'> {
  const { manifest, file, bytes } = readManifestFile(where);
  if (!manifest.quantization) throw new OfframpError('usage', 'not a quantized folder: whole-network firmware needs int8 stages (run offramp quantize, or build --int8)', file);
  const chosen = o.policy ?? (manifest.policy?.rule !== undefined ? { value: manifest.policy.rule, from: 'the manifest' } : undefined);
  if (!chosen) throw new OfframpError('usage', 'the manifest holds no policy yet (run offramp tune, or give --policy)', file);
  verifyStageFiles(manifest, file);
  // the decision code reads each exit's scale from the manifest, the network from the stage files: they must agree
  checkQuantizedChain(manifest, file);
  const program = lowerChain(manifest, path.dirname(path.resolve(file)), file);
  const manifestName = path.relative(path.resolve(outDir), path.resolve(file)).split(path.sep).join('/');
  const manifestSha256 = crypto.createHash('sha256').update(bytes).digest('hex');
  const decision = emitC({
    manifest, manifestName, manifestSha256,
    policy: chosen.value as Policy, policyFrom: chosen.from, policyFile: chosen === o.policy ? o.policy.file ?? '--policy' : file,
  }, file);
  const files = [...decision.files, ...netTables({ program, manifestName, manifestSha256 }), ...fixedSources()];
  const names = new Set<string>();
  for (const f of files) { if (names.has(f.name)) throw new OfframpError('io', `two firmware files named ${f.name}`); names.add(f.name); }
  return { program, table: decision.table, policyFrom: chosen.from, policy: chosen.value as Policy, files };
}

/** Write the library into `outDir` (all files or none). */
export function writeFirmware(where: string, outDir: string, o: FirmwareOptions = {}): FirmwareResult {
  const r = firmwareFiles(where, outDir, o);
  const written = r.files.map((f) => path.join(outDir, f.name));
  writeAllAtomic(r.files.map((f, k) => ({ file: written[k], data: f.text })));
  return { ...r, written };
}

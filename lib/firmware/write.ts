// emit-c on a quantized folder: the whole int8 network as a C99 library. The fixed sources
// (kernels, the step walker, the entry points) are copied as they are in the package; the
// model's tables and the policy's constants are generated. Every file goes in, or none does.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import type { Policy } from '../policy/index.js';
import { writeAllAtomic } from '../util/atomic.js';
import { refuseForeignC } from '../util/own-c.js';
import { shippedPath } from '../util/shipped.js';
import { decisionC } from '../emit/write.js';
import type { ChainTable } from '../emit/table.js';
import { lowerChain } from './lower.js';
import { netTables } from './tables.js';
import type { Program } from './program.js';

/** Where the fixed C sources are: lib/kernels and lib/firmware/c, from the sources or from dist/. */
export function firmwareSourceDirs(): string[] {
  return [shippedPath('kernels/offramp_kernels.h', 'the int8 kernels'), shippedPath('firmware/c/offramp_model.h', 'the firmware entry points')].map((f) => path.dirname(f));
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
  const d = decisionC(where, outDir, {
    ...o,
    require: (m, file) => { if (!m.quantization) throw new OfframpError('usage', 'not a quantized folder: whole-network firmware needs int8 stages (run offramp quantize, or build --int8)', file); },
  });
  const program = lowerChain(d.manifest, path.dirname(path.resolve(d.file)), d.file);
  const files = [...d.out.files, ...netTables({ program, manifestName: d.manifestName, manifestSha256: d.manifestSha256 }), ...fixedSources()];
  const names = new Set<string>();
  for (const f of files) { if (names.has(f.name)) throw new OfframpError('io', `two firmware files named ${f.name}`); names.add(f.name); }
  return { program, table: d.out.table, policyFrom: d.policyFrom, policy: d.policy, files };
}

/** Write the library into `outDir` (all files or none). */
export function writeFirmware(where: string, outDir: string, o: FirmwareOptions = {}): FirmwareResult {
  const r = firmwareFiles(where, outDir, o);
  const written = r.files.map((f) => path.join(outDir, f.name));
  refuseForeignC(written);
  writeAllAtomic(r.files.map((f, k) => ({ file: written[k], data: f.text })));
  return { ...r, written };
}

// Where the harness's C, assembly and linker scripts live: beside this module in the sources
// (lib/measure/harness), and there too when running from dist/ (the package ships lib/**/*.c|h|ld).
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { OfframpError } from '../errors.js';

const HERE = path.dirname(fileURLToPath(import.meta.url));

let found: string | undefined;

/** The harness folder (holds startup.c, trace.c, boot.c, semihost.c, the .ld files and plugin/). */
export function harnessDir(): string {
  if (found) return found;
  const candidates = [path.join(HERE, 'harness'), path.join(HERE, '..', '..', '..', 'lib', 'measure', 'harness')];
  found = candidates.find((d) => fs.existsSync(path.join(d, 'startup.c')));
  if (!found) throw new OfframpError('io', 'the measuring harness sources are missing from the installation', candidates[0]);
  return found;
}

/** The harness's firmware sources, in link order. */
export const HARNESS_SOURCES = ['startup.c', 'trace.c', 'boot.c', 'semihost.c'] as const;

// Files the package ships under lib/ as they are (C sources, linker scripts, the measured-rates
// table), found from the sources (lib/…) or from the compiled modules (dist/lib/…, beside which the
// package keeps lib/).
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { OfframpError } from '../errors.js';

const HERE = path.dirname(fileURLToPath(import.meta.url));
// lib/util → the project root; dist/lib/util → dist, whose parent is the root
const ROOTS = [path.join(HERE, '..', '..'), path.join(HERE, '..', '..', '..')];

/** The path of `lib/<rel>`; `what` names it in the error when the installation lacks it. */
export function shippedPath(rel: string, what: string): string {
  for (const root of ROOTS) {
    const p = path.join(root, 'lib', rel);
    if (fs.existsSync(p)) return p;
  }
  throw new OfframpError('io', `${what} (lib/${rel}) is missing from this installation`, path.join(ROOTS[0], 'lib', rel));
}

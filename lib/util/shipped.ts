// Files the package ships under lib/ as they are (C sources, linker scripts, the measured-rates
// table), found from the sources (lib/…) or from the compiled modules (dist/lib/…, beside which the
// package keeps lib/).
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
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

/**
 * A worker thread's compiled module `rel` (relative to dist/lib), for a module at `from` (its import.meta.url):
 * beside it when it runs compiled, or, when it runs from its TypeScript source (the test runner), the build's
 * copy; undefined without a build (the caller then stays on its own thread).
 */
export function compiledModule(from: string, rel: string): URL | undefined {
  const here = fileURLToPath(from);
  const lib = path.join(path.dirname(here), '..');
  if (here.endsWith('.js')) return pathToFileURL(path.join(lib, rel));
  const built = path.join(lib, '..', 'dist', 'lib', rel);
  return fs.existsSync(built) ? pathToFileURL(built) : undefined;
}

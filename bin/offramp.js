#!/usr/bin/env node
// The CLI loads onnxruntime-node's native runtime on start. When that fails (the package missing, or an
// install stopped by its CUDA download on a machine that reaches only the npm registry), say in one
// line what fixes it instead of a stack trace.
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';

let main;
try {
  ({ main } = await import('../dist/lib/cli/main.js'));
} catch (e) {
  const root = path.dirname(path.dirname(fileURLToPath(import.meta.url)));
  // A checkout (package-lock.json is never packed) builds and restores its own packages; an installed
  // package reinstalls itself (a global install lives in <node's prefix>/lib/node_modules).
  const checkout = fs.existsSync(path.join(root, 'package-lock.json'));
  if (checkout && !fs.existsSync(path.join(root, 'dist', 'lib', 'cli', 'main.js'))) {
    process.stderr.write('offramp: this checkout is not built yet; run: npm run build\n');
    process.exit(1);
  }
  if (!/onnxruntime/.test(`${e?.message ?? e}\n${e?.stack ?? ''}`)) throw e;
  const global = path.dirname(root) === path.join(path.dirname(path.dirname(process.execPath)), 'lib', 'node_modules');
  const { version } = JSON.parse(fs.readFileSync(path.join(root, 'package.json'), 'utf8'));
  const fix = checkout ? 'npm ci' : `ONNXRUNTIME_NODE_INSTALL=skip npm install${global ? ' -g' : ''} offramp@${version}`;
  const why = String(e?.message ?? e).split('\n')[0];
  process.stderr.write(`offramp: the onnxruntime-node runtime did not load (${why}); reinstall it with: ${fix}\n`);
  process.exit(1);
}
main(process.argv.slice(2)).then((code) => { process.exitCode = code; });

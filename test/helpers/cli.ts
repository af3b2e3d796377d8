// Run the built CLI as a user would: a child process, its stdout, stderr and exit code.
import { spawnSync } from 'node:child_process';
import path from 'node:path';

const BIN = path.resolve(import.meta.dirname, '../../bin/offramp.js');

export function offramp(args: string[], opts: { cwd?: string; input?: string } = {}) {
  const r = spawnSync(process.execPath, [BIN, ...args], { encoding: 'utf8', cwd: opts.cwd, input: opts.input, env: { ...process.env, NO_COLOR: '1' } });
  return { code: r.status ?? -1, stdout: r.stdout, stderr: r.stderr };
}

// `offramp emit-c DIR -o OUTDIR [--policy JSON|FILE]`: C99 decision code for a firmware.
import fs from 'node:fs';
import type { Command } from 'commander';
import { OfframpError } from '../errors.js';
import { writeC } from '../emit/write.js';
import { emit } from './common.js';

/** --policy takes inline JSON (starts with '{') or a file holding it. */
function readPolicy(v: string): { value: unknown; from: string; file?: string } {
  const inline = v.trimStart().startsWith('{');
  let text = v;
  if (!inline) {
    try { text = fs.readFileSync(v, 'utf8'); } catch (e) { throw new OfframpError('io', `cannot read: ${(e as Error).message}`, v); }
  }
  try { return { value: JSON.parse(text), from: inline ? '--policy' : `--policy ${v}`, file: inline ? '--policy' : v }; } catch (e) {
    throw new OfframpError('decode', `policy is not JSON: ${(e as Error).message}`, inline ? '--policy' : v);
  }
}

export function emitCCommand(program: Command): void {
  program.command('emit-c')
    .description('write offramp_policy.h and offramp_policy.c: stage table, chosen policy and decision functions in C99')
    .argument('<dir>', 'split folder (or its manifest.json)')
    .requiredOption('-o, --out <dir>', 'folder for the C files')
    .option('--policy <json|file>', "policy JSON (inline or a file); required while the manifest holds none")
    .action((dir: string, o: { out: string; policy?: string }) => {
      const r = writeC(dir, o.out, o.policy !== undefined ? { policy: readPolicy(o.policy) } : {});
      const t = r.table;
      emit(`wrote ${r.written.join(', ')}\n${t.stages.length} stages, ${t.exits} exits, ${t.classes} classes; policy from ${r.policyFrom}\n`);
    });
}

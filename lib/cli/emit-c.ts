// `offramp emit-c DIR -o OUTDIR [--policy JSON|FILE]`: C99 decision code for a firmware.
import type { Command } from 'commander';
import { OfframpError } from '../errors.js';
import { writeC } from '../emit/write.js';
import { C_FILES_PATTERN } from '../emit/c.js';
import { emit } from './common.js';
import { refuseInputsAsOutputs, splitReads } from './guard.js';
import { readManifestFile } from '../split/read.js';
import { checkOutDir, readRegular } from '../util/fsx.js';
import { parseJsonText } from '../util/json.js';

/** --policy takes inline JSON (starts with '{') or a file holding it. */
function readPolicy(v: string): { value: unknown; from: string; file?: string } {
  const inline = v.trimStart().startsWith('{');
  let text = v;
  if (!inline) text = readRegular(v, 'policy').toString('utf8');
  const j = parseJsonText(text, 'a policy object');
  if (!j.ok) throw new OfframpError('decode', `policy is ${j.message}`, inline ? '--policy' : v);
  return { value: j.value, from: inline ? '--policy' : `--policy ${v}`, file: inline ? '--policy' : v };
}

export function emitCCommand(program: Command): void {
  program.command('emit-c')
    .description('write the C99 decision code: offramp_policy.{h,c} (stage table, chosen policy), offramp_config.h and the decision library offramp_decide.{h,c}')
    .argument('<dir>', 'split folder (or its manifest.json)')
    .requiredOption('-o, --out <dir>', 'folder for the C files')
    .option('--policy <json|file>', "policy JSON (inline or a file); required while the manifest holds none")
    .action((dir: string, o: { out: string; policy?: string }) => {
      const { manifest } = readManifestFile(dir);
      const policyFile = o.policy !== undefined && !o.policy.trimStart().startsWith('{') ? o.policy : undefined;
      refuseInputsAsOutputs([...splitReads(dir, manifest), { file: policyFile, role: 'policy' }], [], [{ dir: o.out, names: C_FILES_PATTERN }]);
      checkOutDir(o.out);
      const r = writeC(dir, o.out, o.policy !== undefined ? { policy: readPolicy(o.policy) } : {});
      const t = r.table;
      emit(`wrote ${r.written.join(', ')}\n${t.stages.length} stages, ${t.exits} exits, ${t.classes} classes; policy from ${r.policyFrom}\n`);
    });
}

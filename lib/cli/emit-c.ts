// `offramp emit-c DIR -o OUTDIR [--policy JSON|FILE]`: C99 decision code for a firmware.
import type { Command } from 'commander';
import { OfframpError } from '../errors.js';
import { writeC } from '../emit/write.js';
import { writeFirmware } from '../firmware/write.js';
import { handoverBytes } from '../firmware/program.js';
import { emit } from './common.js';
import { refuseInputsAsOutputs, splitReads } from './guard.js';
import { chooseChain, readManifestFile } from '../split/read.js';
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
    .description('on a quantized folder: the whole int8 network with its exits and policy as a C99 library; on a float folder: the decision code (offramp_policy.h, offramp_policy.c)')
    .argument('<dir>', 'quantized or split folder (or its manifest.json)')
    .requiredOption('-o, --out <dir>', 'folder for the C files')
    .option('--policy <json|file>', "policy JSON (inline or a file); required while the manifest holds none")
    .option('--float', 'on a build --int8 folder: the float chain, not the int8 one it deploys')
    .action((where: string, o: { out: string; policy?: string; float?: boolean }) => {
      const choice = chooseChain(where, { float: o.float });
      const dir = choice.file;
      const { manifest } = readManifestFile(dir);
      const policyFile = o.policy !== undefined && !o.policy.trimStart().startsWith('{') ? o.policy : undefined;
      refuseInputsAsOutputs([...splitReads(dir, manifest), { file: policyFile, role: 'policy' }], [], [{ dir: o.out, names: /^offramp_\w+\.[ch]$/ }]);
      checkOutDir(o.out);
      const given = o.policy !== undefined ? { policy: readPolicy(o.policy) } : {};
      if (manifest.quantization) {
        const f = writeFirmware(dir, o.out, given);
        const p = f.program;
        const weights = p.stages.reduce((a, s) => a + s.steps.reduce((b, st) => b + ('p' in st && 'weight' in st.p ? st.p.weight.length : 0), 0), 0);
        emit(`${choice.line}\nwrote the int8 network as C99 into ${o.out} (${f.written.length} files): ${p.stages.length} stages, ${f.table.exits} exits, ${p.classes} classes; policy from ${f.policyFrom}\n`
          + `memory: ${weights} bytes of int8 weights in flash, arena ${p.arenaBytes} bytes + handover ${handoverBytes(p)} bytes + logits ${p.logits.length * p.classes} bytes in RAM\n`
          + `next: compile every .c in ${o.out} with your firmware (C99, no malloc, no libm) and call offramp_classify(frame); see offramp_model.h\n`);
        return;
      }
      const r = writeC(dir, o.out, given);
      const t = r.table;
      emit(`${choice.line}\nwrote the decision code only (a float folder): ${r.written.join(', ')}\n${t.stages.length} stages, ${t.exits} exits, ${t.classes} classes; policy from ${r.policyFrom}\n`
        + `for the whole network as int8 C, quantize first (offramp quantize ${dir} --data ROWS.npy -o QDIR) and run emit-c on QDIR\n`);
    });
}

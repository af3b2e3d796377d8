// The command line: thin commands over the library.
import { Command, CommanderError } from 'commander';
import { costCommand } from './cost.js';
import { graftCommand } from './graft.js';
import { scanCommand } from './scan.js';
import { splitCommand } from './split.js';
import { checkCommand } from './check.js';
import { emitCCommand } from './emit-c.js';
import { buildCommand } from './build.js';
import { tuneCommand } from './tune.js';
import { replayCommand } from './replay.js';
import { quantizeCommand } from './quantize.js';
import { measureCommand } from './measure.js';
import { EXIT, fail } from './common.js';
import { VERSION } from '../version.js';

/** Every command, in the order --help lists them (test/docs-commands.test.ts reads their options from here). */
export const COMMANDS: ((program: Command) => void)[] = [costCommand, graftCommand, scanCommand, splitCommand, checkCommand, emitCCommand, buildCommand, tuneCommand, replayCommand, quantizeCommand, measureCommand];

export async function main(argv: string[]): Promise<number> {
  const debug = argv.includes('--debug');
  const program = new Command('offramp')
    .description('retrofit early exits onto trained ONNX classifiers for microcontrollers')
    .version(VERSION)
    .option('--debug', 'show stack traces on errors')
    .exitOverride()
    .configureOutput({ writeErr: (s) => process.stderr.write(s) });
  for (const add of COMMANDS) add(program);
  for (const c of program.commands) c.exitOverride();
  try {
    await program.parseAsync(argv, { from: 'user' });
    return EXIT.ok;
  } catch (e) {
    if (e instanceof CommanderError) {
      if (e.code === 'commander.helpDisplayed' || e.code === 'commander.version' || e.code === 'commander.help') return EXIT.ok;
      return EXIT.usage;
    }
    return fail(e, debug);
  }
}

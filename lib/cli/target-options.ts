// The chip a report is judged against: the same options on every command that budgets.
import type { Command } from 'commander';
import fs from 'node:fs';
import { BUILTIN_TARGETS } from '../chip/target.js';

export function targetOptions(c: Command): Command {
  return c
    .option('--target <file|name>', `target profile: a JSON file or a built-in core class (${Object.keys(BUILTIN_TARGETS).join(', ')}; flash, RAM and clock from memory; MAC rates measured on the emulated core, m0plus's from memory)`)
    .option('--flash <bytes>', 'flash for weights (K/KiB = 1024, M/MiB = 1024²; 0x hex)')
    .option('--ram <bytes>', 'RAM for activations and handover buffers')
    .option('--clock-mhz <f>', 'core clock in MHz')
    .option('--macs-per-cycle <r>', 'sustained MACs per cycle on the stored (float32) model')
    .option('--int8-macs-per-cycle <r>', 'sustained MACs per cycle for the int8 projection (default: --macs-per-cycle)')
    .option('--int8', 'judge the budget (and the exit code) on the int8 projection instead of the model as stored');
}

/** The profile file --target reads, if it names one rather than a built-in core class. */
export const targetFile = (t?: string): string | undefined => (t && !Object.hasOwn(BUILTIN_TARGETS, t) && fs.existsSync(t) ? t : undefined);

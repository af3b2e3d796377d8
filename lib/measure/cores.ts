// The cores offramp measures on, each with the QEMU 7.2 machine that has it and the compiler flags
// of its usual hard-float build (Arm's -mcpu/-mfpu names as gcc spells them).
import { OfframpError } from '../errors.js';

export interface Core {
  name: MeasuredCore;
  /** The QEMU machine (`-M`). */
  machine: string;
  /** Flags for arm-none-eabi-gcc, beyond -mthumb. */
  flags: readonly string[];
  /** Linker script in harness/: the machine's memory map. */
  memory: string;
  /** The machine's core clock, Hz (QEMU: 25 MHz on the MPS2 boards, 32 MHz on the AN547). */
  clockHz: number;
}

export type MeasuredCore = 'm4f' | 'm7' | 'm55';

export const CORES: Readonly<Record<MeasuredCore, Core>> = {
  m4f: { name: 'm4f', machine: 'mps2-an386', flags: ['-mcpu=cortex-m4', '-mfloat-abi=hard', '-mfpu=fpv4-sp-d16'], memory: 'memory-an386.ld', clockHz: 25_000_000 },
  m7: { name: 'm7', machine: 'mps2-an500', flags: ['-mcpu=cortex-m7', '-mfloat-abi=hard', '-mfpu=fpv5-d16'], memory: 'memory-an500.ld', clockHz: 25_000_000 },
  m55: { name: 'm55', machine: 'mps3-an547', flags: ['-mcpu=cortex-m55', '-mfloat-abi=hard'], memory: 'memory-an547.ld', clockHz: 32_000_000 },
};

/** Cores known to offramp that QEMU 7.2 cannot run, with the reason, one line each. */
export const UNMEASURABLE: Readonly<Record<string, string>> = {
  m0plus: 'QEMU 7.2 has no Cortex-M0+ machine, so m0plus cannot be measured; measure on m4f, m7 or m55',
};

/** The core named `name`, or a usage error naming the option `option`. */
export function coreOf(name: unknown, option = 'core'): Core {
  if (typeof name === 'string' && Object.hasOwn(CORES, name)) return CORES[name as MeasuredCore];
  if (typeof name === 'string' && Object.hasOwn(UNMEASURABLE, name)) throw new OfframpError('usage', `${option}: ${UNMEASURABLE[name]}`);
  throw new OfframpError('usage', `${option}: ${JSON.stringify(name)} is not a measured core (m4f, m7, m55)`);
}

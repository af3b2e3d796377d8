// Finding the tools: the Arm cross compiler with newlib, QEMU's Arm system emulator, and the host
// gcc that builds the counter plugin. Everything else in offramp works without them.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';

export const DEBIAN_PACKAGES = 'gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm';

export interface Toolchain {
  /** arm-none-eabi-gcc, arm-none-eabi-ar, qemu-system-arm and the host gcc, as absolute paths. */
  armGcc: string;
  armAr: string;
  qemu: string;
  hostGcc: string;
}

export interface ToolchainStatus {
  ready: boolean;
  /** Executables not found on PATH (or newlib-nano missing, as "newlib-nano"). */
  missing: string[];
  /** The one line to print when not ready. */
  message: string;
  tools?: Toolchain;
}

function onPath(name: string, env: NodeJS.ProcessEnv): string | undefined {
  for (const dir of (env.PATH ?? '').split(path.delimiter)) {
    if (!dir) continue;
    const p = path.join(dir, name);
    try {
      fs.accessSync(p, fs.constants.X_OK);
      if (fs.statSync(p).isFile()) return p;
    } catch { /* not here */ }
  }
  return undefined;
}

/** Newlib-nano beside the cross compiler (Debian's libnewlib-arm-none-eabi puts it under
 *  <prefix>/lib/arm-none-eabi/newlib/). */
function haveNewlibNano(armGcc: string): boolean {
  let prefix: string;
  try { prefix = path.dirname(path.dirname(fs.realpathSync(armGcc))); } catch { return false; }
  return fs.existsSync(path.join(prefix, 'lib', 'arm-none-eabi', 'newlib', 'nano.specs'))
    || fs.existsSync(path.join(prefix, 'arm-none-eabi', 'lib', 'nano.specs'));
}

/** Which of the tools are there. Never throws. */
export function toolchainStatus(env: NodeJS.ProcessEnv = process.env): ToolchainStatus {
  const armGcc = onPath('arm-none-eabi-gcc', env);
  const armAr = onPath('arm-none-eabi-ar', env);
  const qemu = onPath('qemu-system-arm', env);
  const hostGcc = onPath('gcc', env);
  const missing: string[] = [];
  if (!armGcc) missing.push('arm-none-eabi-gcc');
  if (!armAr) missing.push('arm-none-eabi-ar');
  if (armGcc && !haveNewlibNano(armGcc)) missing.push('newlib-nano');
  if (!qemu) missing.push('qemu-system-arm');
  if (!hostGcc) missing.push('gcc');
  if (missing.length) {
    const packages = missing.includes('gcc') ? `${DEBIAN_PACKAGES} gcc` : DEBIAN_PACKAGES;
    return { ready: false, missing, message: `measuring on the emulated Cortex-M needs ${missing.join(', ')}: apt-get install ${packages}` };
  }
  return { ready: true, missing, message: 'ready', tools: { armGcc: armGcc!, armAr: armAr!, qemu: qemu!, hostGcc: hostGcc! } };
}

/** The tools, or a usage error (the CLI's exit 2) naming the packages to install. */
export function requireToolchain(env: NodeJS.ProcessEnv = process.env): Toolchain {
  const s = toolchainStatus(env);
  if (!s.tools) throw new OfframpError('usage', s.message);
  return s.tools;
}

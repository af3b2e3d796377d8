// The counter plugin, built from harness/plugin/ with the host gcc on first use and kept in a cache
// folder under a name made of its sources' SHA-256, so a changed source is rebuilt and an unchanged
// one is compiled once per machine. Written under a temporary name and renamed, so a concurrent
// run sees the whole .so or none.
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import { harnessDir } from './harness.js';
import { runTool } from './spawn.js';

const FLAGS = ['-shared', '-fPIC', '-O2', '-std=c99', '-Wall', '-Wextra', '-Werror'];

/** The cache folder: $OFFRAMP_CACHE, else offramp-cache in the system's temporary folder. */
export function cacheDir(env: NodeJS.ProcessEnv = process.env): string {
  return env.OFFRAMP_CACHE || path.join(os.tmpdir(), 'offramp-cache');
}

/** Path of the built counter plugin, building it if the cache lacks it. */
export async function counterPlugin(hostGcc: string, env: NodeJS.ProcessEnv = process.env): Promise<string> {
  const dir = path.join(harnessDir(), 'plugin');
  const files = ['api.h', 'counter.c'];
  const h = crypto.createHash('sha256');
  for (const f of files) h.update(f).update('\0').update(fs.readFileSync(path.join(dir, f))).update('\0');
  h.update(FLAGS.join(' '));
  const cache = cacheDir(env);
  const so = path.join(cache, `counter-${h.digest('hex').slice(0, 16)}.so`);
  if (fs.existsSync(so)) return so;
  try { fs.mkdirSync(cache, { recursive: true }); } catch (e) { throw new OfframpError('io', `cannot make the cache folder: ${(e as Error).message}`, cache); }
  const tmp = `${so}.${process.pid}.${Date.now()}.tmp`;
  const r = await runTool(hostGcc, [...FLAGS, '-o', tmp, path.join(dir, 'counter.c')], { timeoutMs: 60_000 });
  if (r.code !== 0) {
    fs.rmSync(tmp, { force: true });
    throw new OfframpError('runtime', `building the counter plugin failed: ${r.stderr.trim().split('\n')[0] ?? ''}`, path.join(dir, 'counter.c'));
  }
  fs.renameSync(tmp, so);
  return so;
}

// One writer per output folder, and nothing left behind by one that stopped: a lock file
// beside the folder holding the writer's pid (a dead writer's lock is taken over), scratch
// and temporary files of dead writers cleared, and SIGINT/SIGTERM running the cleanups of
// the writes in progress before the signal takes its usual course.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';

/** Is a process with this pid running? (EPERM: it runs under another user.) */
export function alive(pid: number): boolean {
  if (!Number.isSafeInteger(pid) || pid <= 0) return false;
  try { process.kill(pid, 0); return true; } catch (e) { return (e as NodeJS.ErrnoException).code === 'EPERM'; }
}

const readPid = (file: string): number | undefined => {
  let t: string;
  try { t = fs.readFileSync(file, 'utf8').trim(); } catch { return undefined; }
  return /^\d+$/.test(t) ? Number(t) : 0;
};

const ioError = (e: unknown, file: string) => new OfframpError('io', `cannot write: ${(e as Error).message}`, file);

/** The scratch folder a build of `dir` works in, beside it. */
export const scratchOf = (dir: string, pid = process.pid) => `${path.resolve(dir)}.partial-${pid}`;
export const lockOf = (dir: string) => `${path.resolve(dir)}.lock`;

export interface FolderLock { file: string; release(): void }

/**
 * Place `lock` holding our pid; false if it exists. A complete file (pid inside) is hard-linked
 * into place, so the lock never exists empty and the link fails atomically when another writer got
 * there first (as O_EXCL would). Where the file system has no hard links (FAT, some network
 * mounts), O_EXCL itself, the pid written right after.
 */
function place(mine: string, lock: string): boolean {
  try { fs.linkSync(mine, lock); return true; } catch (e) {
    const code = (e as NodeJS.ErrnoException).code;
    if (code === 'EEXIST') return false;
    if (!['EPERM', 'ENOTSUP', 'EOPNOTSUPP', 'ENOSYS'].includes(code ?? '')) throw ioError(e, lock);
  }
  let fd: number;
  try { fd = fs.openSync(lock, 'wx'); } catch (e) {
    if ((e as NodeJS.ErrnoException).code === 'EEXIST') return false;
    throw ioError(e, lock);
  }
  try { fs.writeSync(fd, `${process.pid}\n`); } finally { fs.closeSync(fd); }
  return true;
}

/** A lock still empty: its writer is between O_EXCL and writing its pid, unless that was long ago. */
const fresh = (file: string) => { try { return Date.now() - fs.statSync(file).mtimeMs < 10_000; } catch { return false; } };

/** Take the lock of `dir`, or refuse if a live process holds it. */
export function lockFolder(dir: string): FolderLock {
  const lock = lockOf(dir);
  const mine = `${lock}.${process.pid}`;
  try {
    fs.mkdirSync(path.dirname(lock), { recursive: true });
    fs.writeFileSync(mine, `${process.pid}\n`);
  } catch (e) { throw ioError(e, lock); }
  try {
    for (let attempt = 0; !place(mine, lock); attempt++) {
      const pid = readPid(lock);
      if (attempt >= 5 || (pid !== undefined && (alive(pid) || (pid === 0 && fresh(lock))))) throw busy(dir, pid);
      if (pid !== undefined) takeOver(lock, mine, pid, dir);
    }
  } finally { fs.rmSync(mine, { force: true }); }
  return {
    file: lock,
    release: () => { if (readPid(lock) === process.pid) fs.rmSync(lock, { force: true }); },
  };
}

const busy = (dir: string, pid: number | undefined) =>
  new OfframpError('io', `another offramp${pid ? ` (pid ${pid})` : ''} is writing this folder; run again when it has finished`, dir);

/**
 * Remove the lock of a dead writer. A second lock file (the breaker) makes the check and the
 * removal one step, so two processes taking over at once cannot remove each other's fresh lock.
 */
function takeOver(lock: string, mine: string, stale: number, dir: string): void {
  const breaker = `${lock}.break`;
  if (!place(mine, breaker)) {
    const pid = readPid(breaker);
    if (pid !== undefined && alive(pid)) throw busy(dir, pid);
    fs.rmSync(breaker, { force: true }); // its taker died mid-way
    return;
  }
  try { if (readPid(lock) === stale) fs.rmSync(lock, { force: true }); } finally { fs.rmSync(breaker, { force: true }); }
}

const TEMP = /^\..+\.(\d+)\.\d+\.tmp$/;

/**
 * Clear what writers of `dir` that no longer run left behind: their scratch folders beside
 * it, their temporary files in it (`util/atomic.ts` names them with the pid), their lock files.
 */
export function clearStale(dir: string): void {
  const abs = path.resolve(dir), parent = path.dirname(abs), base = path.basename(abs);
  const dead = (pid: string) => pid !== String(process.pid) && !alive(Number(pid));
  let beside: string[] = [];
  try { beside = fs.readdirSync(parent); } catch { return; }
  for (const f of beside) {
    const m = f.startsWith(base) ? /^\.partial-(\d+)$|^\.lock\.(\d+)$/.exec(f.slice(base.length)) : null;
    if (m && dead(m[1] ?? m[2])) fs.rmSync(path.join(parent, f), { recursive: true, force: true });
  }
  let inside: string[] = [];
  try { inside = fs.readdirSync(abs); } catch { return; }
  for (const f of inside) {
    const m = TEMP.exec(f);
    if (m && dead(m[1])) fs.rmSync(path.join(abs, f), { force: true });
  }
}

// ── cleanups on SIGINT / SIGTERM ───────────────────────────────────────────

const cleanups = new Set<() => void>();
const SIGNALS = ['SIGINT', 'SIGTERM'] as const;
let installed = false;

function onSignal(sig: NodeJS.Signals): void {
  for (const c of [...cleanups].reverse()) { try { c(); } catch { /* the others still run */ } }
  cleanups.clear();
  // With no other listener, the signal ends the process as it would have without us.
  if (process.listeners(sig).every((l) => l === onSignal)) {
    for (const s of SIGNALS) process.removeListener(s, onSignal);
    installed = false;
    process.kill(process.pid, sig);
  }
}

/**
 * Run `cleanup` if SIGINT or SIGTERM arrives before the returned function is called. The
 * handlers, once installed, stay: a signal that arrives during a synchronous step (a commit
 * of renames) is handled after it, and must still end the process then, not be lost; with
 * nothing to clean up, the handler passes the signal on to its usual course.
 */
export function onInterrupt(cleanup: () => void): () => void {
  if (!installed) { for (const s of SIGNALS) process.on(s, onSignal); installed = true; }
  cleanups.add(cleanup);
  return () => { cleanups.delete(cleanup); };
}

/**
 * Hold the lock of `dir` for `work` (sync or async), after clearing dead writers' leftovers.
 * `cleanup` (removing scratch) runs when the work ends however it ends, SIGINT/SIGTERM
 * included, and the lock is released after it.
 */
export function withFolder<T>(dir: string, work: () => T, cleanup: () => void = () => {}): T {
  const lock = lockFolder(dir);
  const all = () => { try { cleanup(); } finally { lock.release(); } };
  const off = onInterrupt(all);
  // A signal that arrived during a synchronous step is still pending: one more turn of the event
  // loop (the immediate) lets its handler run, where an idle loop would end the process first.
  const done = () => { off(); all(); setImmediate(() => {}); };
  let r: T;
  try {
    clearStale(dir);
    r = work();
  } catch (e) { done(); throw e; }
  if (r instanceof Promise) return r.finally(done) as T;
  done();
  return r;
}

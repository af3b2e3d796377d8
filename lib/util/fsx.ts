// File-system failures as one line naming the path: the only place a Node error
// code becomes words. Inputs must be regular files: a FIFO or a device would block
// a read forever or never end, so it is refused before it is opened.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';

const WORDS: Record<string, string> = {
  ENOENT: 'no such file or folder',
  EISDIR: 'is a folder, not a file',
  ENOTDIR: 'a part of the path is a file, not a folder',
  ELOOP: 'symbolic links here form a loop',
  EACCES: 'permission denied',
  EPERM: 'operation not permitted',
  EEXIST: 'already exists (and is not a folder)',
  ENOSPC: 'no space left on the device',
  EROFS: 'read-only file system',
  ENAMETOOLONG: 'the path is too long',
  EMFILE: 'too many open files',
  EBUSY: 'the file is busy',
  ENOTEMPTY: 'the folder is not empty',
  EXDEV: 'cannot move across file systems',
};

/** What a Node errno code means, in words; unknown codes keep their name. */
export function fsWords(e: unknown): string {
  const err = e as NodeJS.ErrnoException;
  return (err?.code && WORDS[err.code]) ?? (err?.code ? `${err.code}: ${err.message}` : String(err?.message ?? e));
}

/** True for a Node system error (it has an errno code). */
export const isFsError = (e: unknown): e is NodeJS.ErrnoException =>
  e instanceof Error && typeof (e as NodeJS.ErrnoException).code === 'string' && /^E[A-Z]+$/.test((e as NodeJS.ErrnoException).code!);

/** A Node fs error as an OfframpError naming `file` (default: the path the error names). */
export function fsError(e: unknown, file?: string, doing?: string): OfframpError {
  if (e instanceof OfframpError) return e;
  const where = file ?? (e as NodeJS.ErrnoException)?.path;
  return new OfframpError('io', doing ? `${doing}: ${fsWords(e)}` : fsWords(e), where);
}

function kindOf(st: fs.Stats): string {
  if (st.isDirectory()) return 'a folder';
  if (st.isFIFO()) return 'a FIFO (named pipe)';
  if (st.isSocket()) return 'a socket';
  if (st.isCharacterDevice() || st.isBlockDevice()) return 'a device';
  return 'not a regular file';
}

/** Refuse anything but a regular file (links followed); returns its size. */
export function regularFile(file: string, what = 'input'): number {
  let st: fs.Stats;
  try { st = fs.statSync(file); } catch (e) { throw fsError(e, file); }
  if (!st.isFile()) throw new OfframpError('io', `is ${kindOf(st)}, not a regular file (the ${what} must be a regular file)`, file);
  return st.size;
}

/** The whole of a regular file. */
export function readRegular(file: string, what = 'input'): Buffer {
  regularFile(file, what);
  try { return fs.readFileSync(file); } catch (e) { throw fsError(e, file); }
}

/** A read descriptor of a regular file. */
export function openRegular(file: string, what = 'input'): number {
  regularFile(file, what);
  try { return fs.openSync(file, 'r'); } catch (e) { throw fsError(e, file); }
}

/**
 * A folder a command will write into, checked before any work (nothing is created here): an existing
 * non-folder is refused, and so is a path whose nearest existing ancestor is not a writable folder.
 */
export function checkOutDir(dir: string): void {
  const stat = (p: string) => {
    try { return fs.statSync(p, { throwIfNoEntry: false }); } catch (e) {
      if ((e as NodeJS.ErrnoException).code === 'ENOTDIR') return undefined; // a file further up: found below
      throw fsError(e, dir);
    }
  };
  const st = stat(dir);
  if (st && !st.isDirectory()) throw new OfframpError('usage', `is ${st.isFile() ? 'a file' : kindOf(st)}, not a folder to write into`, dir);
  let at = path.resolve(dir), up = st;
  while (!up) { at = path.dirname(at); up = stat(at); }
  if (!up.isDirectory()) throw new OfframpError('usage', `cannot create a folder here: ${at} is a file`, dir);
  try { fs.accessSync(at, fs.constants.W_OK); } catch (e) { throw fsError(e, dir, `cannot write into ${at}`); }
}

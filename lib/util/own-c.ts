// The C files offramp writes open with a comment naming the file ("/* offramp_net.c: …"), generated and
// fixed alike. A file of such a name without that first line is someone's own: it is never replaced or removed.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';

/** Whether `file` (existing) opens as the C files offramp writes do. */
export function writtenByOfframp(file: string): boolean {
  let head = '';
  try {
    const fd = fs.openSync(file, 'r');
    try {
      const b = Buffer.alloc(128);
      head = b.subarray(0, fs.readSync(fd, b, 0, b.length, 0)).toString('latin1');
    } finally { fs.closeSync(fd); }
  } catch { return false; }
  return head.startsWith(`/* ${path.basename(file)}:`);
}

/** Refuse (exit 2) to write over an existing file of `files` that offramp did not write. */
export function refuseForeignC(files: string[]): void {
  for (const f of files) {
    if (fs.existsSync(f) && !writtenByOfframp(f)) throw new OfframpError('usage', 'exists and is not a file offramp wrote (its first line is not offramp\'s): move it, or give another output folder', f);
  }
}

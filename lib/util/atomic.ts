// Outputs appear whole or not at all: write beside the target, then rename.
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';

export function writeAtomic(file: string, data: Uint8Array | string | Uint8Array[]): void {
  const dir = path.dirname(path.resolve(file));
  const tmp = path.join(dir, `.${path.basename(file)}.${process.pid}.${Date.now()}.tmp`);
  try {
    const fd = fs.openSync(tmp, 'w');
    try {
      for (const chunk of Array.isArray(data) ? data : [data]) {
        if (typeof chunk === 'string') fs.writeSync(fd, chunk);
        else { let off = 0; while (off < chunk.length) off += fs.writeSync(fd, chunk, off); }
      }
      fs.fsyncSync(fd);
    } finally { fs.closeSync(fd); }
    fs.renameSync(tmp, file);
  } catch (e) {
    fs.rmSync(tmp, { force: true });
    throw new OfframpError('io', `cannot write: ${(e as Error).message}`, file);
  }
}

/**
 * Several files that belong together: every one is written to its temp file first, then all
 * are renamed. A failure before the renames leaves the targets as they were, and removes the
 * folders this call created (no empty output folder).
 */
export function writeAllAtomic(files: { file: string; data: Uint8Array | string }[]): void {
  const made: string[] = [];
  const temps: { tmp: string; file: string }[] = [];
  try {
    for (const { file, data } of files) {
      const dir = path.dirname(path.resolve(file));
      const first = fs.mkdirSync(dir, { recursive: true });
      if (first) made.push(first);
      const tmp = path.join(dir, `.${path.basename(file)}.${process.pid}.${Date.now()}.tmp`);
      temps.push({ tmp, file });
      fs.writeFileSync(tmp, data);
    }
  } catch (e) {
    for (const t of temps) fs.rmSync(t.tmp, { force: true });
    for (const d of made.reverse()) fs.rmSync(d, { recursive: true, force: true });
    throw new OfframpError('io', `cannot write: ${(e as Error).message}`, temps.at(-1)?.file ?? files[0]?.file);
  }
  for (const t of temps) fs.renameSync(t.tmp, t.file);
}

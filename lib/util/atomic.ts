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

// The one guard every command runs before it writes: no output may be, or resolve
// (through symbolic or hard links) to, a file the command reads. Files are compared
// by device and inode, so `-o link-to-model.onnx` and a hard link are caught too.
import fs from 'node:fs';
import path from 'node:path';
import { usageError } from '../errors.js';
import { allTensors, confinedPath, EXTERNAL } from '../onnx/external.js';
import type { Model } from '../graph/ir.js';
import type { Manifest } from '../split/manifest.js';
import { manifestPath } from '../split/read.js';

/** A file a command reads, and what it is to the user (named in the refusal). */
export interface Read { file?: string; role: string }

const idOf = (file: string): string | undefined => {
  try { const st = fs.statSync(file); return `${st.dev}:${st.ino}`; } catch { return undefined; }
};

/** The regular files under a folder input (a TensorProto data folder is two levels deep). */
function filesUnder(dir: string, depth: number, out: string[]): void {
  let names: string[];
  try { names = fs.readdirSync(dir); } catch { return; }
  for (const n of names) {
    const p = path.join(dir, n);
    const st = fs.statSync(p, { throwIfNoEntry: false });
    if (st?.isFile()) out.push(p);
    else if (st?.isDirectory() && depth > 0) filesUnder(p, depth - 1, out);
  }
}

/** Inputs as identities; a folder input stands for the files in it. */
function identities(reads: Read[]): Map<string, Read> {
  const ids = new Map<string, Read>();
  for (const r of reads) {
    if (!r.file) continue;
    const st = (() => { try { return fs.statSync(r.file); } catch { return undefined; } })();
    if (!st) continue;
    if (st.isDirectory()) {
      const files: string[] = [];
      filesUnder(r.file, 2, files);
      for (const f of files) { const id = idOf(f); if (id && !ids.has(id)) ids.set(id, { file: f, role: r.role }); }
    } else ids.set(`${st.dev}:${st.ino}`, r);
  }
  return ids;
}

/**
 * Refuse, as a usage error (exit 2), any of `writes` (files) that is one of `reads`. `dirs` are output
 * folders with the names a command writes or replaces in them: each existing entry matching is checked too,
 * and a folder that is itself an input file is refused.
 */
export function refuseInputsAsOutputs(reads: Read[], writes: (string | undefined)[], dirs: { dir: string; names: RegExp }[] = []): void {
  const ids = identities(reads);
  const check = (out: string, shown = out) => {
    const id = idOf(out);
    const hit = id && ids.get(id);
    if (hit) throw usageError(`${shown}: refusing to write over an input (${hit.role} ${hit.file})`);
  };
  for (const w of writes) if (w) check(w);
  for (const { dir, names } of dirs) {
    check(dir);
    let entries: string[] = [];
    try { entries = fs.readdirSync(dir); } catch { /* not there yet: nothing to collide with */ }
    for (const n of entries) if (names.test(n)) check(path.join(dir, n));
  }
}

/** A model and the external data files it reads (locations confined to its folder, as loading checked). */
export function modelReads(model: Model, file: string, role = 'model'): Read[] {
  const out: Read[] = [{ file, role }];
  const seen = new Set<string>();
  for (const t of allTensors(model.proto)) {
    if (t.dataLocation !== EXTERNAL) continue;
    const loc = t.externalData?.find((e) => e.key === 'location')?.value;
    if (!loc || seen.has(loc)) continue;
    seen.add(loc);
    try { out.push({ file: confinedPath(file, loc), role: 'external data' }); } catch { /* loading already refused it */ }
  }
  return out;
}

/** A split folder's manifest and its stage files. */
export function splitReads(where: string, manifest: Manifest): Read[] {
  const file = manifestPath(where), dir = path.dirname(file);
  return [{ file, role: 'manifest' }, ...manifest.stages.map((s) => ({ file: path.join(dir, s.file), role: 'stage file' }))];
}

/**
 * Extra rows that must not be the same rows: `--unlabelled` naming the `--data` file (by any path or
 * link, or a byte-identical copy) would count each row twice in a bound. A usage error (exit 2).
 */
export function refuseSameRows(data: string, extra: string | undefined, option = '--unlabelled'): void {
  if (!extra) return;
  let a: fs.Stats, b: fs.Stats;
  try { a = fs.statSync(data); b = fs.statSync(extra); } catch { return; /* the readers say what is missing */ }
  const same = (a.dev === b.dev && a.ino === b.ino) || (a.isFile() && b.isFile() && a.size === b.size && sameBytes(data, extra));
  if (same) throw usageError(`${option} ${extra}: holds the same rows as --data ${data}; counted twice they would make the bound look tighter than the evidence is: give rows --data does not hold`);
}

function sameBytes(a: string, b: string): boolean {
  try { return fs.readFileSync(a).equals(fs.readFileSync(b)); } catch { return false; }
}

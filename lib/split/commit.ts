// How a split or build folder changes without ever being inconsistent. The manifest is the
// folder's index and its rename is the commit point:
//   1. files holding content carry their hash in the name (stage-0.<16 hex>.onnx,
//      model.<16 hex>.onnx), so new ones go in beside the files the current manifest names;
//   2. files that describe the manifest (report.json, report.html, the firmware code: each
//      names the manifest's SHA-256) are removed;
//   3. the manifest is renamed in;
//   4. the new describing files are renamed in;
//   5. content files the new manifest does not name are removed (in a nested split folder,
//      DIR/int8, those its own manifest does not name).
// Stopped at any point (SIGKILL included), the folder holds one manifest whose files all exist
// with the SHA-256 it records, and describing files, where present, that describe it.
import crypto from 'node:crypto';
import fs from 'node:fs';
import path from 'node:path';
import { writtenByOfframp } from '../util/own-c.js';
import { OfframpError } from '../errors.js';

export const sha256 = (b: Uint8Array) => crypto.createHash('sha256').update(b).digest('hex');

/** `stage-0` + bytes → `stage-0.<first 16 hex of the SHA-256>.onnx`: same bytes, same name. */
export const hashedName = (stem: string, bytes: Uint8Array) => `${stem}.${sha256(bytes).slice(0, 16)}.onnx`;

/** Where `build --int8` puts the quantized split, inside the build folder. */
export const INT8_DIR = 'int8';

/**
 * Files that describe one manifest (each names its SHA-256): a split removes them, a build writes
 * them anew. The firmware code holds the stage table: stale, it would be wrong, not just old.
 */
export const DESCRIBING = ['report.json', 'report.html', 'firmware/offramp_policy.h', 'firmware/offramp_policy.c', 'firmware/offramp_config.h', 'firmware/offramp_net.h', 'firmware/offramp_net.c', `${INT8_DIR}/manifest.json`];

/**
 * Split folders a build nests in its own (`build --int8` writes the quantized split into DIR/int8).
 * Their manifest describes the outer one (its `quantization.from` holds the outer manifest's SHA-256),
 * so it goes and comes as the reports do; their content files are content as the outer ones are.
 */
export const NESTED = [INT8_DIR];

/** Content files of offramp's splits and builds (earlier versions' plain stage names included). */
const CONTENT = /^(?:stage-\d+|model)\.[0-9a-f]{16}\.onnx$|^stage-\d+\.onnx$/;
export const isContentFile = (name: string) => CONTENT.test(name);

interface Named { stages: { file: string }[]; source: { file: string } }

const real = (f: string) => { try { return fs.realpathSync(f); } catch { return path.resolve(f); } };

/** What offramp wrote into a folder and its nested folders, as their manifests named it before a commit. */
export type Owned = Map<string, Set<string>>;

const namesOf = (file: string): Set<string> => {
  try {
    const m = JSON.parse(fs.readFileSync(file, 'utf8')) as Named;
    return new Set([...(Array.isArray(m.stages) ? m.stages.map((s) => String(s?.file)) : []), ...(m.source?.file ? [String(m.source.file)] : [])]);
  } catch { return new Set(); }
};

/** Call before step 2: the files the folder's current manifests name (the sweep may remove those). */
export function ownedBefore(dir: string, manifestName: string): Owned {
  const owned: Owned = new Map([['', namesOf(path.join(dir, manifestName))]]);
  for (const n of NESTED) owned.set(n, namesOf(path.join(dir, n, manifestName)));
  return owned;
}

/**
 * Did offramp write this content file? A hashed name holds the first 16 hex of the file's own SHA-256
 * (a user's file that merely looks like one does not); any other name only if the folder's previous
 * manifest named it.
 */
function written(p: string, name: string, before: Set<string> | undefined): boolean {
  if (before?.has(name)) return true;
  const m = /\.([0-9a-f]{16})\.onnx$/.exec(name);
  if (!m) return false;
  try { return sha256(fs.readFileSync(p)).startsWith(m[1]); } catch { return false; }
}

/**
 * Step 5: remove content files `manifest` does not name that offramp wrote (see `written`); never one
 * of `keep` (the source model, the data, say). In a nested split folder, the same against its own
 * manifest, or all such files if it has none (a build without --int8 over one with it); the folder
 * goes once empty.
 */
export function sweep(dir: string, manifest: Named | undefined, keep: string[] = [], before?: Set<string>): void {
  const named = new Set(manifest ? [...manifest.stages.map((s) => s.file), manifest.source.file] : []);
  const kept = new Set(keep.map(real));
  let files: string[];
  try { files = fs.readdirSync(dir); } catch { return; }
  for (const f of files) {
    const p = path.join(dir, f);
    if (isContentFile(f) && !named.has(f) && !kept.has(real(p)) && written(p, f, before)) fs.rmSync(p, { force: true });
  }
  if (!manifest) { try { fs.rmdirSync(dir); } catch { /* not empty: files it does not own stay */ } }
}

/** Step 5 for the nested folders of `dir`. */
function sweepNested(dir: string, manifestName: string, keep: string[], owned?: Owned): void {
  for (const n of NESTED) {
    const sub = path.join(dir, n);
    if (!fs.existsSync(sub)) continue;
    let m: Named | undefined;
    try { m = JSON.parse(fs.readFileSync(path.join(sub, manifestName), 'utf8')) as Named; } catch { m = undefined; }
    sweep(sub, m, keep, owned?.get(n));
  }
}

/** Step 5 for a folder and its nested folders; `owned` from `ownedBefore`, taken before step 2. */
export function sweepAll(dir: string, manifest: Named, manifestName: string, keep: string[] = [], owned?: Owned): void {
  sweep(dir, manifest, keep, owned?.get(''));
  sweepNested(dir, manifestName, keep, owned);
}

/** The firmware folder of a build and the C files offramp writes there (the int8 library: tables, kernels, entry points). */
export const FIRMWARE_FILES = { dir: 'firmware', names: /^offramp_\w+\.[ch]$/ };

/** Step 2. The firmware goes whole: a kernel file of an earlier int8 build must not outlive its tables. */
export function removeDescribing(dir: string, more: string[] = []): void {
  for (const f of new Set([...DESCRIBING, ...more])) fs.rmSync(path.join(dir, f), { force: true });
  const fw = path.join(dir, FIRMWARE_FILES.dir);
  let names: string[] = [];
  try { names = fs.readdirSync(fw); } catch { /* no firmware folder */ }
  // a file of offramp's names that offramp did not write is someone's: it stays
  for (const n of names) if (FIRMWARE_FILES.names.test(n) && writtenByOfframp(path.join(fw, n))) fs.rmSync(path.join(fw, n), { force: true });
}

/**
 * Move a finished folder's files (names relative to `from`, the manifest `manifestName`
 * among them) into `dir` in the order above. Every other file is taken to describe the
 * manifest. Runs synchronously: a SIGINT handler waits until it is done.
 */
export function commitFolder(from: string, dir: string, files: string[], manifestName: string, keep: string[] = []): void {
  fs.mkdirSync(dir, { recursive: true });
  const owned = ownedBefore(dir, manifestName);
  const move = (f: string) => {
    fs.mkdirSync(path.dirname(path.join(dir, f)), { recursive: true });
    fs.renameSync(path.join(from, f), path.join(dir, f));
  };
  const content = files.filter((f) => isContentFile(path.posix.basename(f)));
  // A nested manifest before the files that may describe it (the firmware of an int8 build).
  const nested = (f: string) => f !== manifestName && path.posix.basename(f) === manifestName;
  const describing = files.filter((f) => f !== manifestName && !content.includes(f));
  describing.sort((a, b) => Number(nested(b)) - Number(nested(a)));
  content.forEach(move);
  removeDescribing(dir, describing);
  move(manifestName);
  describing.forEach(move);
  sweepAll(dir, JSON.parse(fs.readFileSync(path.join(dir, manifestName), 'utf8')) as Named, manifestName, keep, owned);
}

/**
 * The stage files a manifest names, each inside the manifest's folder and with the SHA-256 the
 * manifest records; the first that is not is an error naming it.
 */
export function verifyStageFiles(manifest: { stages: { file: string; sha256: string }[] }, manifestFile: string): void {
  const dir = path.dirname(path.resolve(manifestFile));
  for (const s of manifest.stages) {
    const file = path.resolve(dir, String(s.file));
    if (path.relative(dir, file).startsWith('..') || path.isAbsolute(path.relative(dir, file)))
      throw new OfframpError('decode', `stage file '${s.file}' lies outside the manifest's folder`, manifestFile);
    let bytes: Buffer;
    try { bytes = fs.readFileSync(file); } catch { throw new OfframpError('io', 'stage file is missing', file); }
    if (sha256(bytes) !== s.sha256) throw new OfframpError('io', 'stage file changed since the split (SHA-256 differs from the manifest)', file);
  }
}

// Reading a manifest back: every command that takes a split folder (check, tune,
// replay, emit-c) reads it here, so a hand-edited or truncated manifest fails as
// one line naming the file and the field, before anything indexes into it.
import crypto from 'node:crypto';
import fs from 'node:fs';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import { fsError, readRegular } from '../util/fsx.js';
import { parseJsonText } from '../util/json.js';
import { MANIFEST_FILE, MANIFEST_SCHEMA, type Manifest } from './manifest.js';

/** The manifest file a command argument names: the file itself, or manifest.json in a folder. */
export function manifestPath(where: string): string {
  let st: fs.Stats | undefined;
  try { st = fs.statSync(where, { throwIfNoEntry: false }); } catch (e) { throw fsError(e, where); }
  return st?.isDirectory() ? path.join(where, MANIFEST_FILE) : where;
}

/** Read, parse and check a manifest; `bytes` are the file as read (emit-c names their hash). */
export function readManifestFile(where: string): { manifest: Manifest; file: string; bytes: Buffer } {
  const file = manifestPath(where);
  if (!fs.existsSync(file)) throw new OfframpError('io', 'no manifest here (run offramp split first)', file);
  const bytes = readRegular(file, 'manifest');
  const j = parseJsonText(bytes.toString('utf8'), `a split manifest (${MANIFEST_SCHEMA})`);
  if (!j.ok) throw new OfframpError('decode', j.message, file);
  return { manifest: checkManifest(j.value, file), file, bytes };
}

const isObj = (x: unknown): x is Record<string, unknown> => !!x && typeof x === 'object' && !Array.isArray(x);
const isCount = (x: unknown) => typeof x === 'number' && Number.isFinite(x) && x >= 0;

/** The fields the commands index into, checked for shape; returns the value typed. */
export function checkManifest(m: unknown, file: string): Manifest {
  const bad = (msg: string, where?: string) => new OfframpError('decode', where ? msg : `manifest ${msg}`, file, where);
  if (!isObj(m)) throw bad('is not a JSON object');
  if (m.schema !== MANIFEST_SCHEMA) throw new OfframpError('decode', `manifest schema is '${String(m.schema)}', expected '${MANIFEST_SCHEMA}'`, file);
  const tensors = (v: unknown, what: string) => {
    if (!Array.isArray(v)) throw bad(`field '${what}' is missing or not a list`);
    v.forEach((t, i) => {
      if (!isObj(t) || typeof t.name !== 'string' || typeof t.dtype !== 'string' || !Array.isArray(t.shape)) throw bad(`${what}[${i}] needs a name, a dtype and a shape`);
    });
  };
  tensors(m.inputs, 'inputs');
  tensors(m.outputs, 'outputs');
  if (!Array.isArray(m.stages) || !m.stages.length) throw bad(`field 'stages' is ${Array.isArray(m.stages) ? 'empty' : 'missing or not a list'}`);
  m.stages.forEach((s, i) => {
    const at = `stages[${i}]`;
    if (!isObj(s)) throw bad('entry is not an object', at);
    if (s.index !== i) throw bad(`index is ${JSON.stringify(s.index)}, expected ${i} (stages are listed in order)`, at);
    // Stage files live beside the manifest: a name that leaves the folder is never followed.
    if (typeof s.file !== 'string' || !s.file || path.isAbsolute(s.file) || /[\\/]/.test(s.file) || s.file === '..' || s.file === '.')
      throw bad(`file ${JSON.stringify(s.file)} is not a file name in the manifest's folder`, at);
    if (typeof s.sha256 !== 'string' || !/^[0-9a-f]{64}$/.test(s.sha256)) throw bad('sha256 is not a hex SHA-256', at);
    tensors(s.inputs, `${at}.inputs`);
    tensors(s.outputs, `${at}.outputs`);
    for (const k of ['exits', 'cut'] as const) if (!Array.isArray(s[k]) || !s[k].every((x) => typeof x === 'string')) throw bad(`'${k}' is not a list of names`, at);
    for (const k of ['macs', 'weightBytes', 'peakActivationBytes', 'handoverBytes'] as const) if (!isCount(s[k])) throw bad(`'${k}' is not a count`, at);
    (s.inputs as Record<string, unknown>[]).forEach((t, k) => {
      if (t.from !== 'input' && !(Number.isInteger(t.from) && (t.from as number) >= 0 && (t.from as number) < i)) throw bad(`inputs[${k}].from is ${JSON.stringify(t.from)}: a model input or an earlier stage`, at);
    });
  });
  return m as unknown as Manifest;
}

/** Which chain of a folder a command runs: the one a build deploys unless told otherwise. */
export interface ChainChoice {
  /** the manifest file to read */
  file: string;
  precision: 'int8' | 'float';
  /** the first line of the command's output: which chain, and why */
  line: string;
}

const NESTED_INT8 = 'int8';

/** The SHA-256 a quantized manifest records of the float split it came from, if it reads as one. */
function quantizedFrom(file: string): { file: string; sha256: string } | undefined {
  try {
    const q = (JSON.parse(fs.readFileSync(file, 'utf8')) as Partial<Manifest>).quantization?.from;
    return q && typeof q.file === 'string' && typeof q.sha256 === 'string' ? q : undefined;
  } catch { return undefined; }
}

const hex = (b: Uint8Array) => crypto.createHash('sha256').update(b).digest('hex');

/**
 * On a build folder, the chain that will be deployed: after `build --int8`, DIR/int8 (its manifest
 * quantized from DIR's as it is now). `float`: the float chain instead (for DIR/int8 given directly,
 * the float split it was quantized from). Anything else is the folder's own chain.
 */
export function chooseChain(where: string, o: { float?: boolean } = {}): ChainChoice {
  const file = manifestPath(where);
  const dir = path.dirname(file);
  const nested = path.join(dir, NESTED_INT8, MANIFEST_FILE);
  const own = quantizedFrom(file);
  const floatFlag = '--float for the float chain';
  let deploys: string | undefined;
  if (!own && fs.existsSync(nested)) {
    const from = quantizedFrom(nested);
    let bytes: Buffer | undefined;
    try { bytes = fs.readFileSync(file); } catch { bytes = undefined; }
    if (from && bytes && from.sha256 === hex(bytes)) deploys = nested;
  }
  if (o.float) {
    if (own) {
      const floatFile = path.resolve(dir, own.file);
      return { file: floatFile, precision: 'float', line: `chain: ${floatFile} (float, --float: the split ${file} was quantized from)` };
    }
    return { file, precision: 'float', line: `chain: ${file} (float, --float${deploys ? `; the build deploys ${nested}` : ''})` };
  }
  if (deploys) return { file: deploys, precision: 'int8', line: `chain: ${deploys} (int8, the chain this build deploys; ${floatFlag})` };
  return own ? { file, precision: 'int8', line: `chain: ${file} (int8; ${floatFlag})` } : { file, precision: 'float', line: `chain: ${file} (float)` };
}

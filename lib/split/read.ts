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
  const quantOf = (t: Record<string, unknown>, at: string) => {
    if (t.quant === undefined) return;
    const q = t.quant as Record<string, unknown>;
    // QuantizeLinear's scale is a positive finite float and an int8 zero point lies in [-128, 127] (ONNX operator spec).
    if (!isObj(q) || !(typeof q.scale === 'number' && Number.isFinite(q.scale) && q.scale > 0)) throw bad(`quant.scale of '${String(t.name)}' is ${JSON.stringify(isObj(q) ? q.scale : q)}: a positive finite number`, at);
    if (!(Number.isInteger(q.zeroPoint) && (q.zeroPoint as number) >= -128 && (q.zeroPoint as number) <= 127)) throw bad(`quant.zeroPoint of '${String(t.name)}' is ${JSON.stringify(q.zeroPoint)}: a whole number in [-128, 127]`, at);
  };
  (m.outputs as Record<string, unknown>[]).forEach((t, k) => quantOf(t, `outputs[${k}]`));
  m.stages.forEach((s: Record<string, unknown>, i) => {
    const at = `stages[${i}]`;
    for (const k of ['inputs', 'outputs'] as const) (s[k] as Record<string, unknown>[]).forEach((t) => quantOf(t, at));
    if (s.arena !== undefined) {
      const a = s.arena as Record<string, unknown>;
      if (!isObj(a) || !Array.isArray(a.buffers) || !isCount(s.arenaBytes)) throw bad("arena needs a list of buffers and 'arenaBytes' a count", at);
      for (const b of a.buffers as Record<string, unknown>[]) {
        // firmware places each buffer at its offset inside one block of arenaBytes: past its end it would write out of bounds
        if (!isObj(b) || typeof b.name !== 'string' || !isCount(b.offset) || !isCount(b.bytes) || !Number.isInteger(b.offset) || !Number.isInteger(b.bytes))
          throw bad('arena buffer needs a name, a whole offset and whole bytes', at);
        if ((b.offset as number) + (b.bytes as number) > (s.arenaBytes as number))
          throw bad(`arena buffer '${b.name}' ends at byte ${(b.offset as number) + (b.bytes as number)}, past arenaBytes ${s.arenaBytes as number}`, at);
      }
    }
  });
  if (m.policy !== undefined) checkManifestPolicy(m.policy, bad);
  return m as unknown as Manifest;
}

/** The policy's guarantee as the reports print it: every figure a number in its range, or the manifest is refused. */
function checkManifestPolicy(p: unknown, bad: (msg: string, where?: string) => OfframpError): void {
  if (!isObj(p)) throw bad("field 'policy' is not an object");
  if (!isObj(p.rule)) throw bad('policy.rule is not an object', 'policy');
  if (p.guarantee === undefined) return;
  const g = p.guarantee;
  if (!isObj(g)) throw bad('guarantee is not an object', 'policy');
  const num = (k: string, lo: number, hi: number, open = false) => {
    const v = g[k];
    if (!(typeof v === 'number' && Number.isFinite(v) && (open ? v > lo && v < hi : v >= lo && v <= hi)))
      throw bad(`guarantee.${k} is ${JSON.stringify(v)}: a number ${open ? 'strictly ' : ''}between ${lo} and ${hi}`, 'policy');
  };
  num('confidence', 0, 1, true);
  num('maxDrop', 0, 100);
  if (typeof g.certified !== 'boolean') throw bad(`guarantee.certified is ${JSON.stringify(g.certified)}: true or false`, 'policy');
  if (g.unit !== 'samples' && g.unit !== 'scenes') throw bad(`guarantee.unit is ${JSON.stringify(g.unit)}: 'samples' or 'scenes'`, 'policy');
  for (const k of ['evidence', 'unlabelled', 'tested', 'passed']) if (!(Number.isInteger(g[k]) && (g[k] as number) >= 0)) throw bad(`guarantee.${k} is ${JSON.stringify(g[k])}: a count`, 'policy');
  for (const k of ['estimate', 'bound', 'margin']) if (!(typeof g[k] === 'number' && Number.isFinite(g[k]))) throw bad(`guarantee.${k} is ${JSON.stringify(g[k])}: a number of points`, 'policy');
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
  let deploys: string | undefined, since = '';
  if (!own && fs.existsSync(nested)) {
    const from = quantizedFrom(nested);
    // DIR/int8 quantized from this manifest; one tuned since (tune DIR rewrites it) is still the build's.
    if (from && path.resolve(path.dirname(nested), from.file) === path.resolve(file)) {
      deploys = nested;
      let bytes: Buffer | undefined;
      try { bytes = fs.readFileSync(file); } catch { bytes = undefined; }
      if (bytes && from.sha256 !== hex(bytes)) since = `; ${file} changed since it was quantized`;
    }
  }
  if (o.float) {
    if (own) {
      const floatFile = path.resolve(dir, own.file);
      return { file: floatFile, precision: 'float', line: `chain: ${floatFile} (float, --float: the split ${file} was quantized from)` };
    }
    return { file, precision: 'float', line: `chain: ${file} (float, --float${deploys ? `; the build deploys ${nested}` : ''})` };
  }
  if (deploys) return { file: deploys, precision: 'int8', line: `chain: ${deploys} (int8, the chain this build deploys${since}; ${floatFlag})` };
  return own ? { file, precision: 'int8', line: `chain: ${file} (int8; ${floatFlag})` } : { file, precision: 'float', line: `chain: ${file} (float)` };
}

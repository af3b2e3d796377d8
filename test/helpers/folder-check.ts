// Is a split or build folder whole? Judged from the files alone, with Node's own SHA-256:
// the manifest names only files that exist with the SHA-256 it records (and their names, where
// hashed, say so), and the reports and the firmware code, where present, describe that manifest
// (name its SHA-256, list its stages); after build --int8, DIR/int8 is such a folder too, its
// manifest naming the outer one as its float split, and the firmware may describe it instead.
import crypto from 'node:crypto';
import fs from 'node:fs';
import path from 'node:path';

const hash = (b: Buffer) => crypto.createHash('sha256').update(b).digest('hex');
const DESCRIBING = ['report.json', 'report.html', 'firmware/offramp_policy.h', 'firmware/offramp_policy.c', 'firmware/offramp_net.h', 'firmware/offramp_net.c', 'int8/manifest.json'];

type Named = { stages: { file: string; sha256: string }[]; source: { file: string; sha256: string }; quantization?: { from: { file: string; sha256: string } } };

/** Files a manifest names (its stages, and its source when in its folder): present, with the SHA-256 it records, under a name that holds it. */
function namedProblems(dir: string, m: Named, prefix = ''): string[] {
  const problems: string[] = [];
  const named = [...m.stages, ...(path.dirname(path.resolve(dir, m.source.file)) === path.resolve(dir) ? [m.source] : [])];
  for (const s of named) {
    const f = path.join(dir, s.file);
    if (!fs.existsSync(f)) { problems.push(`${prefix}${s.file}: named by the manifest, missing`); continue; }
    const h = hash(fs.readFileSync(f));
    if (h !== s.sha256) problems.push(`${prefix}${s.file}: SHA-256 differs from the manifest`);
    // content names carry the first 16 hex of the file's own SHA-256 (DEVELOPERS.md, output folders)
    const inName = /\.([0-9a-f]{16})\.onnx$/.exec(s.file)?.[1];
    if (inName !== undefined && inName !== h.slice(0, 16)) problems.push(`${prefix}${s.file}: its name says other bytes`);
  }
  return problems;
}

/** The problems found; empty when the folder is whole. */
export function folderProblems(dir: string): string[] {
  const problems: string[] = [];
  const mf = path.join(dir, 'manifest.json'), qf = path.join(dir, 'int8/manifest.json');
  if (!fs.existsSync(mf)) {
    // No manifest yet: nothing may claim to describe one.
    for (const f of DESCRIBING) if (fs.existsSync(path.join(dir, f))) problems.push(`${f} without a manifest`);
    return problems;
  }
  const bytes = fs.readFileSync(mf);
  const sha = hash(bytes);
  let m: Named;
  try { m = JSON.parse(bytes.toString('utf8')); } catch { return ['manifest.json is not JSON']; }
  problems.push(...namedProblems(dir, m));
  // build --int8: DIR/int8 is a split folder whose manifest names the outer one as its float split;
  // the firmware then describes the int8 manifest.
  let qsha: string | undefined, q: Named | undefined;
  if (fs.existsSync(qf)) {
    const qb = fs.readFileSync(qf);
    try { q = JSON.parse(qb.toString('utf8')); } catch { problems.push('int8/manifest.json is not JSON'); }
    if (q) {
      if (q.quantization?.from.sha256 !== sha || q.quantization.from.file !== '../manifest.json') problems.push('int8/manifest.json describes another manifest');
      else qsha = hash(qb);
      problems.push(...namedProblems(path.join(dir, 'int8'), q, 'int8/'));
    }
  }
  const rj = path.join(dir, 'report.json');
  if (fs.existsSync(rj)) {
    let r: { manifest?: { sha256?: string }; stages?: { file: string }[]; int8?: { stages: { file: string }[] } } = {};
    try { r = JSON.parse(fs.readFileSync(rj, 'utf8')); } catch { problems.push('report.json is not JSON'); }
    if (r.manifest?.sha256 !== sha) problems.push('report.json describes another manifest');
    if (JSON.stringify(r.stages?.map((s) => s.file)) !== JSON.stringify(m.stages.map((s) => s.file))) problems.push('report.json lists other stage files');
    if (r.int8 && JSON.stringify(r.int8.stages.map((s) => s.file)) !== JSON.stringify(q?.stages.map((s) => s.file))) problems.push('report.json lists other int8 stage files');
  }
  for (const f of DESCRIBING.slice(1)) {
    const p = path.join(dir, f);
    if (!fs.existsSync(p)) continue;
    const t = fs.readFileSync(p, 'utf8');
    if (!t.includes(sha) && !(qsha && t.includes(qsha))) problems.push(`${f} describes another manifest`);
  }
  return problems;
}

/** SHA-256 of the folder's manifest, or '' without one. */
export const manifestSha = (dir: string) => (fs.existsSync(path.join(dir, 'manifest.json')) ? hash(fs.readFileSync(path.join(dir, 'manifest.json'))) : '');

/** Every file under `dir` with its bytes (base64), sorted: a folder's whole state. */
export function snapshot(dir: string): string[][] {
  if (!fs.existsSync(dir)) return [];
  return fs.readdirSync(dir).sort().flatMap((f) => {
    const p = path.join(dir, f);
    return fs.statSync(p).isDirectory() ? snapshot(p).map(([g, b]) => [`${f}/${g}`, b]) : [[f, fs.readFileSync(p).toString('base64')]];
  });
}

// Is a split or build folder whole? Judged from the files alone, with Node's own SHA-256:
// the manifest names only files that exist with the SHA-256 it records, and the reports and
// the firmware code, where present, describe that manifest (name its SHA-256, list its stages).
import crypto from 'node:crypto';
import fs from 'node:fs';
import path from 'node:path';

const hash = (b: Buffer) => crypto.createHash('sha256').update(b).digest('hex');
const DESCRIBING = ['report.json', 'report.html', 'firmware/offramp_policy.h', 'firmware/offramp_policy.c'];

/** The problems found; empty when the folder is whole. */
export function folderProblems(dir: string): string[] {
  const problems: string[] = [];
  const mf = path.join(dir, 'manifest.json');
  if (!fs.existsSync(mf)) {
    // No manifest yet: nothing may claim to describe one.
    for (const f of DESCRIBING) if (fs.existsSync(path.join(dir, f))) problems.push(`${f} without a manifest`);
    return problems;
  }
  const bytes = fs.readFileSync(mf);
  const sha = hash(bytes);
  let m: { stages: { file: string; sha256: string }[]; source: { file: string; sha256: string } };
  try { m = JSON.parse(bytes.toString('utf8')); } catch { return ['manifest.json is not JSON']; }
  const named = [...m.stages, ...(path.dirname(path.resolve(dir, m.source.file)) === path.resolve(dir) ? [m.source] : [])];
  for (const s of named) {
    const f = path.join(dir, s.file);
    if (!fs.existsSync(f)) problems.push(`${s.file}: named by the manifest, missing`);
    else if (hash(fs.readFileSync(f)) !== s.sha256) problems.push(`${s.file}: SHA-256 differs from the manifest`);
  }
  const rj = path.join(dir, 'report.json');
  if (fs.existsSync(rj)) {
    let r: { manifest?: { sha256?: string }; stages?: { file: string }[] } = {};
    try { r = JSON.parse(fs.readFileSync(rj, 'utf8')); } catch { problems.push('report.json is not JSON'); }
    if (r.manifest?.sha256 !== sha) problems.push('report.json describes another manifest');
    if (JSON.stringify(r.stages?.map((s) => s.file)) !== JSON.stringify(m.stages.map((s) => s.file))) problems.push('report.json lists other stage files');
  }
  for (const f of DESCRIBING.slice(1)) {
    const p = path.join(dir, f);
    if (fs.existsSync(p) && !fs.readFileSync(p, 'utf8').includes(sha)) problems.push(`${f} describes another manifest`);
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

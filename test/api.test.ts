// The package root as a build script imports it (self-reference through "exports", so the built dist/),
// and the promise that docs/api.md documents exactly what the root exports.
import { describe, it, expect } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import ts from 'typescript';
import * as offramp from 'offramp';
import * as internals from 'offramp/internals';

const ROOT = path.resolve(import.meta.dirname, '..');

/** Names lib/index.ts exports, read with the TypeScript parser: values and types apart. */
function rootExports(): { values: string[]; types: string[] } {
  const file = path.join(ROOT, 'lib/index.ts');
  const src = ts.createSourceFile(file, fs.readFileSync(file, 'utf8'), ts.ScriptTarget.ES2022, true);
  const values: string[] = [], types: string[] = [];
  for (const st of src.statements) {
    if (!ts.isExportDeclaration(st)) continue;
    // `export *` would hide what is public: the list must be written out
    if (!st.exportClause || !ts.isNamedExports(st.exportClause)) throw new Error(`lib/index.ts: name every export (${st.getText()})`);
    for (const e of st.exportClause.elements) (st.isTypeOnly || e.isTypeOnly ? types : values).push(e.name.text);
  }
  return { values: values.sort(), types: types.sort() };
}

/** Names docs/api.md documents: `### \`name…\`` headings (functions and values), rows of the types table. */
function documented(): { values: string[]; types: string[] } {
  const text = fs.readFileSync(path.join(ROOT, 'docs/api.md'), 'utf8');
  const section = (title: string) => {
    const at = text.indexOf(`\n## ${title}\n`);
    if (at < 0) throw new Error(`docs/api.md has no section '${title}'`);
    const end = text.indexOf('\n## ', at + 1);
    return text.slice(at, end < 0 ? undefined : end);
  };
  const values = [...section('Functions and values').matchAll(/^### `([A-Za-z_$][\w$]*)/gm)].map((m) => m[1]!);
  const types = [...section('Types').matchAll(/^\| `([A-Za-z_$][\w$]*)` \|/gm)].map((m) => m[1]!);
  return { values: values.sort(), types: types.sort() };
}

describe("import … from 'offramp'", () => {
  it('exports exactly the names docs/api.md documents', () => {
    const root = rootExports(), doc = documented();
    expect(root.values.length).toBeGreaterThan(5);
    expect(root.values).toEqual(doc.values);
    expect(root.types).toEqual(doc.types);
  });
  it('the built package exports the same values, and offramp/internals repeats them', () => {
    const root = rootExports();
    expect(Object.keys(offramp).sort()).toEqual(root.values);
    for (const name of root.values) expect((internals as Record<string, unknown>)[name], name).toBe((offramp as Record<string, unknown>)[name]);
    // the building blocks stay reachable, under the marked sub-path only
    for (const name of ['decodeModel', 'inferShapes', 'planArena', 'tune', 'graftExits', 'writeSplit'])
      expect(typeof (internals as Record<string, unknown>)[name], name).toBe('function');
    for (const name of ['decodeModel', 'planArena']) expect(name in offramp, name).toBe(false);
  });
  it("VERSION is package.json's", () => {
    expect(offramp.VERSION).toBe(JSON.parse(fs.readFileSync(path.join(ROOT, 'package.json'), 'utf8')).version);
  });
  it('costs the demo model', async () => {
    const m = offramp.loadModel('models-demo/fan-monitor.onnx');
    const r = await offramp.analyzeModel(m, { cuts: ['/b2/b2.3/MaxPool_output_0'] });
    expect(r.stages).toHaveLength(2);
    expect(r.stages[0]!.macs + r.stages[1]!.macs).toBe(r.model.macs);
    for (const s of r.stages) expect(s.arenaBytes >= s.peakActivationBytes).toBe(true);
  });
});

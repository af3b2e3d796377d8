// Prints, for every conformance node test, whether the static rules reproduce the
// expected output shapes. For rule authors: `npx tsx`-free: run after `npm run build`
// as `node dist/scripts/shape-coverage.js [filter]`.
import fs from 'node:fs';
import { loadModel } from '../lib/graph/io.js';
import { inferShapes } from '../lib/shapes/infer.js';
import { decodeTensor } from '../lib/onnx/codec.js';
import { tensorDims } from '../lib/onnx/tensor.js';
import { cases, dataSet } from '../test/helpers/testdata.js';

export interface CoverageRow { name: string; status: 'match' | 'mismatch' | 'norule' | 'unknown' | 'error'; detail: string }

export function shapeCoverage(filter = ''): CoverageRow[] {
  const rows: CoverageRow[] = [];
  for (const c of cases('node')) {
    if (filter && !c.name.includes(filter)) continue;
    try {
      const m = loadModel(c.model);
      const r = inferShapes(m, { rulesOnly: true, batch: 0 });
      const outs = dataSet(c, 'output');
      const expect = outs.map((f) => tensorDims(decodeTensor(fs.readFileSync(f))));
      const names = m.graph.outputs.map((o) => o.name);
      if (r.noRule.size) { rows.push({ name: c.name, status: 'norule', detail: [...r.noRule.keys()].join(',') }); continue; }
      const bad: string[] = [];
      let unknown = false;
      names.forEach((n, i) => {
        if (i >= expect.length) return;
        const got = r.values.get(n)?.type.shape;
        // No shape, or data-dependent dims left symbolic: both are for measurement, not rule errors.
        if (!got || got.some((d) => typeof d === 'string')) { unknown = true; bad.push(`${n}: unknown`); return; }
        if (JSON.stringify(got) !== JSON.stringify(expect[i])) bad.push(`${n}: got ${JSON.stringify(got)} want ${JSON.stringify(expect[i])}`);
      });
      const fails = r.failures.map((f) => `${f.node}: ${f.message}`);
      rows.push({ name: c.name, status: bad.length ? (unknown && bad.every((b) => b.endsWith('unknown')) ? 'unknown' : 'mismatch') : 'match', detail: [...bad, ...fails].join('; ') });
    } catch (e) {
      rows.push({ name: c.name, status: 'error', detail: (e as Error).message });
    }
  }
  return rows;
}

if (process.argv[1]?.endsWith('shape-coverage.js')) {
  const rows = shapeCoverage(process.argv[2]);
  const by = (s: string) => rows.filter((r) => r.status === s);
  for (const r of rows) if (r.status !== 'match' && (process.argv[3] !== 'quiet' || r.status !== 'norule')) console.log(r.status.padEnd(9), r.name, r.detail);
  console.log(`match ${by('match').length}, mismatch ${by('mismatch').length}, unknown ${by('unknown').length}, norule ${by('norule').length}, error ${by('error').length}, total ${rows.length}`);
}

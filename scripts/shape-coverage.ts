// Prints, for every conformance node test, whether the static rules reproduce the
// expected output shapes. For rule authors: `npx tsx`-free: run after `npm run build`
// as `node dist/scripts/shape-coverage.js [filter]`.
import fs from 'node:fs';
import { loadModel } from '../lib/graph/io.js';
import { inferShapes } from '../lib/shapes/infer.js';
import { decodeTensor } from '../lib/onnx/codec.js';
import type { TensorProto } from '../lib/onnx/types.js';
import { tensorDims } from '../lib/onnx/tensor.js';
import { constFromTensor, type Const } from '../lib/ops/rule.js';
import { isIntType } from '../lib/ops/fold.js';
import { cases, dataSet } from '../test/helpers/testdata.js';

export interface CoverageRow {
  name: string; status: 'match' | 'mismatch' | 'norule' | 'unknown' | 'error'; detail: string;
  /** outputs whose folded values were compared with the expected data and agreed */
  folded?: number;
}

/** The ONNX 1.12 test data stores bfloat16 tensors as uint16 bits: read them as the graph declares. */
const asDeclared = (t: TensorProto, declared?: number): TensorProto => (declared === 16 && t.dataType === 4 ? { ...t, dataType: 16 } : t);

const close = (a: number, b: number, exact: boolean) =>
  exact ? a === b : (Number.isNaN(a) && Number.isNaN(b)) || a === b || Math.abs(a - b) <= 1e-5 * Math.max(1, Math.abs(b));

/**
 * `withInputs`: the test's own input tensors are given to inference as known values,
 * so shape operands that the tests feed as graph inputs fold; then the folded values
 * are compared with the expected outputs too (exact for integers, 1e-5 relative for floats).
 */
export function shapeCoverage(filter = '', withInputs = false): CoverageRow[] {
  const rows: CoverageRow[] = [];
  for (const c of cases('node')) {
    if (filter && !c.name.includes(filter)) continue;
    try {
      const m = loadModel(c.model);
      let inputValues: Map<string, Const> | undefined;
      if (withInputs) {
        const ins = m.graph.inputs.filter((v) => !m.graph.initializers.has(v.name));
        inputValues = new Map();
        dataSet(c, 'input').forEach((f, i) => {
          const k = ins[i] && constFromTensor(asDeclared(decodeTensor(fs.readFileSync(f)), ins[i].type?.dtype));
          if (k) inputValues!.set(ins[i].name, k);
        });
      }
      const r = inferShapes(m, { rulesOnly: true, batch: 0, inputValues });
      const outs = dataSet(c, 'output').map((f, i) => asDeclared(decodeTensor(fs.readFileSync(f)), m.graph.outputs[i]?.type?.dtype));
      const expect = outs.map((t) => tensorDims(t));
      const names = m.graph.outputs.map((o) => o.name);
      if (r.noRule.size) { rows.push({ name: c.name, status: 'norule', detail: [...r.noRule.keys()].join(',') }); continue; }
      const bad: string[] = [];
      let unknown = false, folded = 0;
      names.forEach((n, i) => {
        if (i >= expect.length) return;
        const got = r.values.get(n)?.type.shape;
        // No shape, or data-dependent dims left symbolic: both are for measurement, not rule errors.
        if (!got || got.some((d) => typeof d === 'string')) { unknown = true; bad.push(`${n}: unknown`); return; }
        if (JSON.stringify(got) !== JSON.stringify(expect[i])) { bad.push(`${n}: got ${JSON.stringify(got)} want ${JSON.stringify(expect[i])}`); return; }
        const v = withInputs ? r.values.get(n)?.value : undefined;
        const want = v && constFromTensor(outs[i]);
        // float32 → bfloat16: ONNX 1.12's test data truncates, while onnxruntime and the later spec round to
        // nearest even (onnx/onnx issues 3876 and 5004), as our Cast fold does; compare shapes only there.
        if (v && want && !(want.dtype === 16 && m.graph.nodes.some((x) => x.op === 'Cast' || x.op === 'CastLike'))) {
          const off = want.data.findIndex((w, j) => !close(v.data[j], w, isIntType(want.dtype)));
          if (off >= 0) bad.push(`${n}: folded value [${off}] = ${v.data[off]}, want ${want.data[off]}`);
          else folded++;
        }
      });
      const fails = r.failures.map((f) => `${f.node}: ${f.message}`);
      rows.push({ name: c.name, status: bad.length ? (unknown && bad.every((b) => b.endsWith('unknown')) ? 'unknown' : 'mismatch') : 'match', detail: [...bad, ...fails].join('; '), folded });
    } catch (e) {
      rows.push({ name: c.name, status: 'error', detail: (e as Error).message });
    }
  }
  return rows;
}

if (process.argv[1]?.endsWith('shape-coverage.js')) {
  const rows = shapeCoverage(process.argv[2], process.argv.includes('inputs'));
  const by = (s: string) => rows.filter((r) => r.status === s);
  for (const r of rows) if (r.status !== 'match' && (process.argv[3] !== 'quiet' || r.status !== 'norule')) console.log(r.status.padEnd(9), r.name, r.detail);
  console.log(`folded values checked ${rows.reduce((a, r) => a + (r.folded ?? 0), 0)}; match ${by('match').length}, mismatch ${by('mismatch').length}, unknown ${by('unknown').length}, norule ${by('norule').length}, error ${by('error').length}, total ${rows.length}`);
}

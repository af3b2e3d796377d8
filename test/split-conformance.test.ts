// Reference check: the ONNX backend conformance models (Debian libonnx-testdata,
// every group). Each model with at least one clean cut is split at every clean
// cut; the chain runs on test_data_set_0's inputs and must reproduce its
// output_*.pb (rtol 1e-3 with magnitudes below 1 compared as 1, near the
// backend tests' own rtol 1e-3 / atol 1e-7). Where onnxruntime itself misses the
// expected outputs on the whole model, the chain must match the whole model.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { describe, it, expect } from 'vitest';
import { cases, dataSet, requireTestdata } from './helpers/testdata.js';
import { loadModel } from '../lib/graph/io.js';
import { decodeTensor } from '../lib/onnx/codec.js';
import { scanModel } from '../lib/cuts/scan.js';
import { writeSplit } from '../lib/split/manifest.js';
import { loadChain } from '../lib/run/chain.js';
import { diffTensors } from '../lib/run/check.js';
import { openSession, runSession, tensorFromProto, type OrtTensor } from '../lib/runtime/ort.js';

const MAX_BYTES = 4 << 20;

function readSet(files: string[], names: string[]): Record<string, OrtTensor> {
  return Object.fromEntries(files.map((f, i) => {
    const t = decodeTensor(fs.readFileSync(f));
    return [t.name || names[i], tensorFromProto(t, f)];
  }));
}

describe('split against the ONNX conformance models', () => {
  it('every chain split at every clean cut reproduces the expected outputs', async () => {
    if (!requireTestdata()) return;
    const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-split-conf-'));
    const counts = { models: 0, large: 0, unscannable: 0, noCut: 0, noData: 0, ortLoad: 0, checked: 0, cuts: 0, againstOrt: 0 };
    const failures: string[] = [];
    try {
      for (const c of cases('all')) {
        counts.models++;
        if (fs.statSync(c.model).size > MAX_BYTES) { counts.large++; continue; }
        let plan;
        try { plan = await scanModel(loadModel(c.model)); } catch { counts.unscannable++; continue; }
        const clean = plan.candidates.filter((x) => x.clean);
        if (!clean.length) { counts.noCut++; continue; }
        const ins = dataSet(c, 'input'), outs = dataSet(c, 'output');
        if (!ins.length || !outs.length) { counts.noData++; continue; }
        const g = plan.model.graph;
        let inputs: Record<string, OrtTensor>, expected: Record<string, OrtTensor>;
        // Sequence and optional values are SequenceProto/OptionalProto files, not tensors.
        try {
          inputs = readSet(ins, g.inputs.filter((v) => !g.initializers.has(v.name)).map((v) => v.name));
          expected = readSet(outs, g.outputs.map((v) => v.name));
        } catch { counts.noData++; continue; }
        // The whole model in onnxruntime: does it meet the reference itself?
        let whole: Record<string, OrtTensor>;
        try {
          const s = await openSession(fs.readFileSync(c.model), c.model);
          whole = await runSession(s, inputs, c.model);
          await s.release();
        } catch { counts.ortLoad++; continue; }
        const meets = Object.entries(expected).every(([k, t]) => diffTensors(k, whole[k], t, { rtol: 1e-3 }).ok);
        const reference = meets ? expected : whole;
        if (!meets) counts.againstOrt++;
        const dir = path.join(tmp, c.name.replace('/', '_'));
        try {
          writeSplit(plan, clean, dir, c.model);
          const chain = await loadChain(dir);
          const got = await chain.run(inputs);
          await chain.release();
          for (const [k, t] of Object.entries(reference)) {
            const d = diffTensors(k, got.outputs[k], t, { rtol: 1e-3 });
            if (!d.ok) failures.push(`${c.name}: output ${k}: ${d.note ?? `max abs ${d.maxAbs}, ${d.mismatched} over`}`);
          }
        } catch (e) { failures.push(`${c.name}: ${(e as Error).message}`); }
        counts.checked++;
        counts.cuts += clean.length;
        fs.rmSync(dir, { recursive: true, force: true });
      }
    } finally { fs.rmSync(tmp, { recursive: true, force: true }); }
    console.log(`split conformance: ${counts.checked} models split at ${counts.cuts} clean cuts and checked ` +
      `(${counts.againstOrt} against onnxruntime's own result where it misses the reference) of ${counts.models}; ` +
      `skipped ${counts.large} over ${MAX_BYTES >> 20} MiB, ${counts.noCut} without a clean cut, ${counts.unscannable} not costable, ` +
      `${counts.ortLoad} onnxruntime cannot run, ${counts.noData} without tensor data`);
    expect(failures).toEqual([]);
    expect(counts.checked).toBeGreaterThan(20);
  });
});

// Heads on a real classifier: the Fashion-MNIST CNN fixture (trained with PyTorch,
// scripts/train-fmnist.py) and Debian's dataset-fashion-mnist IDX files.
import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import { loadModel } from '../lib/graph/io.js';
import { readIdxImages, readIdxLabels } from '../lib/data/idx.js';
import { graftExits, type DataSource } from '../lib/heads/fit-heads.js';
import { parseHead } from '../lib/heads/spec.js';
import { openSession, runSession, zeros } from '../lib/runtime/ort.js';
import { encodeModel } from '../lib/onnx/codec.js';
import { modelToProto } from '../lib/graph/ir.js';

const MODEL = 'test/fixtures/fmnist/cnn.onnx';
const DIR = process.env.OFFRAMP_FMNIST ?? '/usr/share/datasets/fashion-mnist';
const have = fs.existsSync(MODEL) && fs.existsSync(`${DIR}/train-images-idx3-ubyte.gz`);
if (!have && process.env.CI) throw new Error(`Fashion-MNIST missing at ${DIR}: apt-get install dataset-fashion-mnist`);

const memory = (x: Float32Array, per: number, rows: number): DataSource => ({
  rows,
  *batches(b) { for (let s = 0; s < rows; s += b) { const r = Math.min(b, rows - s); yield { rows: r, data: x.subarray(s * per, (s + r) * per) }; } },
});

describe.skipIf(!have)('exit heads on the Fashion-MNIST CNN', () => {
  const N = 5000, TEST = 2000, per = 28 * 28;
  const train = have ? readIdxImages(`${DIR}/train-images-idx3-ubyte.gz`) : undefined;
  const trainY = have ? readIdxLabels(`${DIR}/train-labels-idx1-ubyte.gz`) : new Int32Array();
  const test = have ? readIdxImages(`${DIR}/t10k-images-idx3-ubyte.gz`) : undefined;
  const testY = have ? readIdxLabels(`${DIR}/t10k-labels-idx1-ubyte.gz`) : new Int32Array();
  const cuts = ['/b1/b1.2/MaxPool_output_0', '/b2/b2.2/MaxPool_output_0', '/b3/b3.1/Relu_output_0'];

  it('linear heads on 5k training samples: accuracy rises with depth, original output unchanged', async () => {
    const model = loadModel(MODEL);
    const { model: grafted, heads } = await graftExits(model, memory(train!.data, per, N), { cuts, head: parseHead('linear'), labels: trainY.subarray(0, N), seed: 1 });
    // Score every exit on test-set rows the fit never saw.
    const s = await openSession(encodeModel(modelToProto(grafted)));
    const base = await openSession(encodeModel(modelToProto(model)));
    const hits = new Array(heads.length + 1).fill(0);
    let same = true;
    for (let at = 0; at < TEST; at += 500) {
      const x = zeros({ dtype: 1, shape: [500, 1, 28, 28] });
      (x.data as Float32Array).set(test!.data.subarray(at * per, (at + 500) * per));
      const out = await runSession(s, { input: x }), ref = await runSession(base, { input: x });
      same &&= Buffer.from((out.logits.data as Float32Array).buffer).equals(Buffer.from((ref.logits.data as Float32Array).buffer));
      const names = [...heads.map((_, k) => `exit-${k}`), 'logits'];
      names.forEach((nm, k) => {
        const z = out[nm].data as Float32Array;
        for (let i = 0; i < 500; i++) {
          let b = 0;
          for (let c = 1; c < 10; c++) if (z[i * 10 + c] > z[i * 10 + b]) b = c;
          if (b === testY[at + i]) hits[k]++;
        }
      });
    }
    await s.release(); await base.release();
    const acc = hits.map((h) => h / TEST);
    for (const h of heads) console.log(`exit ${h.record.exit} at ${h.record.cut}: held-out accuracy ${h.record.fit.accuracy?.toFixed(4)}, agreement ${h.record.fit.agreement.toFixed(4)}, loss ${h.record.fit.loss}, ${h.record.macs} MACs, ${h.record.params} params`);
    console.log(`test-set accuracy (first ${TEST}) per exit: ${acc.slice(0, -1).map((a) => a.toFixed(4)).join(', ')}; final ${acc[acc.length - 1].toFixed(4)}`);
    expect(same).toBe(true);
    expect(acc[0]).toBeGreaterThan(0.4);
    for (let k = 1; k < acc.length - 1; k++) expect(acc[k]).toBeGreaterThan(acc[k - 1]);
  });

  it('without labels: MLP heads distilled from the final output agree with it more with depth', async () => {
    const { heads } = await graftExits(loadModel(MODEL), memory(train!.data, per, N), { cuts, head: parseHead('mlp:32'), temperature: 2, seed: 1 });
    const agree = heads.map((h) => h.record.fit.agreement);
    console.log(`distilled mlp:32 held-out agreement per exit: ${agree.map((a) => a.toFixed(4)).join(', ')}; params ${heads.map((h) => h.record.params).join(', ')}`);
    expect(agree[0]).toBeGreaterThan(0.5);
    for (let k = 1; k < agree.length; k++) expect(agree[k]).toBeGreaterThan(agree[k - 1]);
  });
});

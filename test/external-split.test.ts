// A model saved by the ONNX Python library with its weights in one external data file
// (test/fixtures/external, made by scripts/make-external-fixture.py with python3-onnx 1.12:
// save_model(..., save_as_external_data=True, all_tensors_to_one_file=True)). Its stage files
// carry the weights inline, so they must not say data_location EXTERNAL any more: onnxruntime
// would look for the weights file beside the stage (issue 11, group 7).
import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import onnxProto from 'onnx-proto';
import { offramp } from './helpers/cli.js';
import { mulberry32 } from '../lib/graph/build.js';
import { writeNpy } from '../lib/data/npy.js';

const FIX = path.resolve(import.meta.dirname, 'fixtures/external');
const MODEL = path.join(FIX, 'resnet-mini.onnx');
const { onnx } = onnxProto;
let tmp: string;

beforeAll(() => { tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-extsplit-')); });

/** Every initializer of a stage file, as the onnx-proto reference decoder reads it. */
const initializers = (file: string) => onnx.ModelProto.decode(fs.readFileSync(file)).graph!.initializer!;

describe('split of a model with external data', () => {
  it('the fixture really keeps every weight outside (as the library wrote it)', () => {
    const inits = onnx.ModelProto.decode(fs.readFileSync(MODEL)).graph!.initializer!;
    expect(inits.length).toBeGreaterThan(20);
    // TensorProto.DataLocation EXTERNAL = 1 (onnx.proto)
    for (const t of inits) expect(t.dataLocation).toBe(1);
  });

  it('writes stage files with their weights inline and no external-data marks; onnxruntime runs the chain as the model', () => {
    const out = path.join(tmp, 'split');
    // Written away from the weights file: a stage that still pointed at it could not load.
    const r = offramp(['split', MODEL, '--at', '40%,70%', '-o', out]);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'manifest.json'), 'utf8'));
    expect(m.stages).toHaveLength(3);
    let count = 0;
    for (const s of m.stages) for (const t of initializers(path.join(out, s.file))) {
      expect(t.dataLocation ?? 0, `${s.file}: ${t.name}`).toBe(0);
      expect(t.externalData ?? [], `${s.file}: ${t.name}`).toEqual([]);
      expect(t.rawData?.length, `${s.file}: ${t.name}`).toBeGreaterThan(0);
      count++;
    }
    expect(count).toBeGreaterThan(20);
    // onnxruntime on the source (external data read by offramp) and on the chain, on the
    // fixture's own inputs and on seeded ones.
    const byData = offramp(['check', out, '--against', MODEL, '--data', path.join(FIX, 'resnet-mini-x.npy')]);
    expect(byData.stderr).toBe('');
    expect(byData.code).toBe(0);
    expect(offramp(['check', out, '--against', MODEL, '--samples', '4']).code).toBe(0);
  });

  it('builds from it: heads fitted and tuned through onnxruntime, the chain checked', () => {
    const rnd = mulberry32(9);
    const x = path.join(tmp, 'x.npy');
    writeNpy(x, Float32Array.from({ length: 24 * 3 * 16 * 16 }, () => rnd() * 2 - 1), [24, 3, 16, 16]);
    const r = offramp(['build', MODEL, '--data', x, '--max-drop', '100', '--candidates', '2', '--max-exits', '1', '-o', path.join(tmp, 'build'), '--json']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(JSON.parse(r.stdout).check.ok).toBe(true);
  });
});

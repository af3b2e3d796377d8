import { describe, it, expect } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';

const MODEL = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');

describe('splitting again into the same folder', () => {
  it('leaves exactly the stage files the new manifest names', () => {
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-resplit-'));
    expect(offramp(['split', MODEL, '--at', '10%,40%,70%', '-o', dir]).code).toBe(0);
    expect(fs.readdirSync(dir).filter((f) => f.startsWith('stage-'))).toHaveLength(4);
    expect(offramp(['split', MODEL, '--at', '40%', '-o', dir]).code).toBe(0);
    const m = JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8'));
    expect(fs.readdirSync(dir).filter((f) => f.startsWith('stage-')).sort()).toEqual(m.stages.map((s: { file: string }) => s.file).sort());
  });
});

describe('split --reorder', () => {
  it('lowers a stage file\'s own peak and the chain still reproduces the model', async () => {
    const { modelBuilder } = await import('../lib/graph/build.js');
    const { saveModel } = await import('../lib/graph/io.js');
    // Four branches written layer by layer (all convs, then all relus, …): finishing one
    // branch before starting the next frees its wide tensors early (worked example:
    // 4 × 16 KiB conv outputs live at once in file order, one at a time reordered).
    const b = modelBuilder({ opset: 17, seed: 3 });
    const x = b.input('x', 1, [1, 8, 16, 16]);
    let t = [0, 1, 2, 3].map((i) => b.node('Conv', [x, b.init(`w${i}`, 1, [16, 8, 1, 1])], { kernel_shape: [1, 1] }));
    t = t.map((v) => b.node('Relu', [v]));
    t = t.map((v) => b.node('MaxPool', [v], { kernel_shape: [2, 2], strides: [2, 2] }));
    let y = t[0];
    for (const v of t.slice(1)) y = b.node('Add', [y, v]);
    const r = b.node('Relu', [y]);
    b.output(b.node('Flatten', [b.node('GlobalAveragePool', [r])]), 1, [1, 16]);
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-reorder-'));
    const model = path.join(dir, 'branches.onnx');
    saveModel(b.build(), model);
    const out = path.join(dir, 'split');
    expect(offramp(['split', model, '--cuts', r, '--reorder', '-o', out]).code).toBe(0);
    const m = JSON.parse(fs.readFileSync(path.join(out, 'manifest.json'), 'utf8'));
    expect(m.stages[0].reorder.after).toBeLessThan(m.stages[0].reorder.before);
    for (const s of m.stages) expect(s.reorder.after).toBeLessThanOrEqual(s.reorder.before);
    expect(offramp(['check', out, '--against', model, '--samples', '4']).code).toBe(0);
  });
});

import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { saveModel, loadModel } from '../lib/graph/io.js';
import { model, vi, node, ints, int, floatTensor } from './helpers/proto.js';

let dir: string, net: string, branches: string;
beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-budget-'));
  // The net of test/target.test.ts: stage 0 (cut at r) needs 448 B of weights, 2048 B peak + 1024 B handover.
  net = path.join(dir, 'tiny.onnx');
  saveModel(model([
    node('Conv', ['x', 'W', 'B'], ['y'], [ints('kernel_shape', [3, 3]), ints('pads', [1, 1, 1, 1])], 'conv'),
    node('Relu', ['y'], ['r'], [], 'relu'),
    node('GlobalAveragePool', ['r'], ['p'], [], 'gap'),
    node('Flatten', ['p'], ['f'], [int('axis', 1)], 'flatten'),
    node('Gemm', ['f', 'Wg', 'bg'], ['logits'], [int('transB', 1)], 'fc'),
  ], [vi('x', [1, 3, 8, 8])], [vi('logits', [1, 10])],
  [floatTensor('W', [4, 3, 3, 3]), floatTensor('B', [4]), floatTensor('Wg', [10, 4]), floatTensor('bg', [10])]), net);
  // Two branches written interleaved (see test/reorder.test.ts): peak 8400 B in file order, 4440 B reordered.
  branches = path.join(dir, 'branches.onnx');
  saveModel(model([
    node('MatMul', ['x', 'Wa1'], ['a1'], [], 'a1'), node('MatMul', ['x', 'Wb1'], ['b1'], [], 'b1'),
    node('MatMul', ['a1', 'Wa2'], ['a2'], [], 'a2'), node('MatMul', ['b1', 'Wb2'], ['b2'], [], 'b2'),
    node('Add', ['a2', 'b2'], ['y'], [], 'add'),
  ], [vi('x', [1, 100])], [vi('y', [1, 10])],
  [floatTensor('Wa1', [100, 1000]), floatTensor('Wb1', [100, 1000]), floatTensor('Wa2', [1000, 10]), floatTensor('Wb2', [1000, 10])]), branches);
});

const chip = ['--flash', '1K', '--ram', '3000', '--clock-mhz', '1', '--macs-per-cycle', '0.5', '--int8-macs-per-cycle', '2'];

describe('offramp cost with a target', () => {
  it('fits: exit 0 and a verdict per stage', () => {
    const r = offramp(['cost', net, '--no-nodes', '--cuts', 'r', '--flash', '1K', '--ram', '4K', '--clock-mhz', '1', '--macs-per-cycle', '0.5']);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/every stage fits/);
    expect(r.stdout).toMatch(/13\.8 ms/); // 6912 MACs / 0.5 per cycle at 1 MHz
    expect(r.stderr).toBe('');
  });
  it('over budget: exit 3, the report names the stage and the margin, one line on stderr', () => {
    const r = offramp(['cost', net, '--no-nodes', '--cuts', 'r', ...chip]);
    expect(r.code).toBe(3);
    expect(r.stdout).toMatch(/OVER BUDGET/);
    expect(r.stdout).toMatch(/stage 0 \(ends at 'r'\): RAM needs 3\.00 KiB \(3072 B\) of 2\.93 KiB \(3000 B\) \(float32\), over by 72 B \(2\.40%\)/);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/^offramp: over budget: stage 0 \(ends at 'r'\): RAM .* over by 72 B/);
  });
  it('--int8 judges the int8 projection', () => {
    expect(offramp(['cost', net, '--no-nodes', '--cuts', 'r', ...chip, '--int8']).code).toBe(0);
  });
  it('JSON for build scripts: the budget field, exact numbers, exit 3 still', () => {
    const r = offramp(['cost', net, '--json', '--cuts', 'r', ...chip]);
    expect(r.code).toBe(3);
    const b = JSON.parse(r.stdout).budget;
    expect(b.target).toMatchObject({ name: 'custom', flashBytes: 1024, ramBytes: 3000, clockMhz: 1, macsPerCycle: 0.5, int8MacsPerCycle: 2, rough: false });
    expect(b.gate).toBe('stored');
    expect(b.fits).toBe(false);
    expect(b.over).toEqual([{ stage: 0, cut: 'r', resource: 'ram', precision: 'stored', need: 3072, limit: 3000, margin: -72, marginPercent: -2.4 }]);
    expect(b.stages[0].stored).toMatchObject({ weightBytes: 448, peakBytes: 2048, handoverBytes: 1024, cycles: 13824, latencyNs: 13824000 });
    expect(b.stages[1].int8).toMatchObject({ weightBytes: 130, peakBytes: 260, handoverBytes: 256 });
    expect(JSON.parse(offramp(['cost', net, '--json']).stdout).budget).toBeUndefined();
  });
  it('Markdown, and a report file written before exit 3', () => {
    const out = path.join(dir, 'budget.md');
    const r = offramp(['cost', net, '--md', '--no-nodes', '--cuts', 'r', ...chip, '-o', out]);
    expect(r.code).toBe(3);
    expect(fs.readFileSync(out, 'utf8')).toMatch(/### Budget[\s\S]*\| 0 \| r \|/);
  });
  it('built-in profiles say their figures are rough', () => {
    const r = offramp(['cost', net, '--no-nodes', '--target', 'm0plus']);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/m0plus: .*ROUGH FIGURES, FROM MEMORY/);
  });
  it('profile files, and their errors as one line naming the file (exit 1); bad options exit 2', () => {
    const good = path.join(dir, 'chip.json');
    fs.writeFileSync(good, JSON.stringify({ name: 'lab board', flashBytes: '1KiB', ramBytes: 3000, clockMhz: 1, macsPerCycle: 0.5 }));
    expect(offramp(['cost', net, '--cuts', 'r', '--target', good]).code).toBe(3);
    expect(offramp(['cost', net, '--cuts', 'r', '--target', good, '--ram', '4KiB']).code).toBe(0);
    const bad = path.join(dir, 'bad.json');
    fs.writeFileSync(bad, JSON.stringify({ flashBytes: '1KiB', ramBytes: 3000, clockMhz: 1, macsPerCycle: 0.5, speed: 3 }));
    const r = offramp(['cost', net, '--target', bad]);
    expect(r.code).toBe(1);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toContain(bad);
    expect(r.stderr).toMatch(/unknown field 'speed'/);
    expect(offramp(['cost', net, '--ram', '12X', '--flash', '1K', '--clock-mhz', '1', '--macs-per-cycle', '1']).code).toBe(2);
    expect(offramp(['cost', net, '--ram', '4K']).code).toBe(2);
    expect(offramp(['cost', net, '--target', 'nosuchcore']).code).toBe(2);
    expect(offramp(['cost', net, '--int8']).code).toBe(2);
  });
  it('is byte-identical across runs', () => {
    const args = ['cost', branches, '--json', '--reorder', '--target', 'm4f'];
    expect(offramp(args).stdout).toBe(offramp(args).stdout);
  });
});

describe('offramp cost --reorder', () => {
  it('reports the peak before and after, and budgets the reordered model', () => {
    const args = ['cost', branches, '--no-nodes', '--ram', '5000', '--flash', '1M', '--clock-mhz', '1', '--macs-per-cycle', '1'];
    expect(offramp(args).code).toBe(3);
    const r = offramp([...args, '--reorder']);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/peak activation 8\.20 KiB → 4\.34 KiB \(-47\.14%\)/);
    const j = JSON.parse(offramp([...args, '--reorder', '--json']).stdout);
    expect(j.reorder).toMatchObject({ before: 8400, after: 4440, order: [0, 2, 1, 3, 4] });
    expect(j.model.peakActivationBytes).toBe(4440);
  });
  it('--save-reordered writes the reordered model', () => {
    const out = path.join(dir, 'reordered.onnx');
    expect(offramp(['cost', branches, '--save-reordered', out]).code).toBe(0);
    expect(loadModel(out).graph.nodes.map((n) => n.name)).toEqual(['a1', 'a2', 'b1', 'b2', 'add']);
  });
});

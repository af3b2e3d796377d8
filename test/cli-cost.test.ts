import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { saveModel } from '../lib/graph/io.js';
import { resnet18 } from './helpers/nets.js';
import { model, vi, node } from './helpers/proto.js';

let dir: string, net: string, cyc: string;
beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-cli-'));
  net = path.join(dir, 'resnet18.onnx');
  saveModel(resnet18({ weights: 'zeros' }), net);
  cyc = path.join(dir, 'cycle.onnx');
  // a → Relu → b → Relu → a: a cycle, written unchecked.
  const m = model([node('Relu', ['b'], ['a']), node('Relu', ['a'], ['b'])], [vi('x', [1])], [vi('a', [1])]);
  saveModel(m, cyc);
});

describe('offramp cost', () => {
  it('prints a JSON report whose totals equal the sum over nodes', () => {
    const r = offramp(['cost', net, '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.schema).toBe('offramp-cost/1');
    expect(j.model.macs).toBe(j.nodes.reduce((s: number, n: { macs: number }) => s + n.macs, 0));
    expect(j.model.params).toBe(j.nodes.reduce((s: number, n: { params: number }) => s + n.params, 0));
    for (const k of ['macs', 'params', 'paramBytes', 'peakActivationBytes', 'arenaBytes']) expect(Number.isInteger(j.model[k])).toBe(true);
    // The arena plan is never below the live-set bound (at the peak step every live buffer needs its own bytes).
    expect(j.model.arenaBytes).toBeGreaterThanOrEqual(j.model.peakActivationBytes);
    expect(Object.keys(j.model).indexOf('arenaBytes')).toBe(Object.keys(j.model).indexOf('peakActivationBytes') + 1);
    expect(j.nodes[0]).toMatchObject({ name: expect.any(String), op: 'Conv', outputs: [{ shape: [1, 64, 112, 112], dtype: 'float32', bytes: 64 * 112 * 112 * 4 }] });
  });
  it('splits totals into stages at --cuts', () => {
    const j = JSON.parse(offramp(['cost', net, '--json', '--cuts', 'layer2.0.relu_out,layer3.0.relu_out']).stdout);
    expect(j.stages).toHaveLength(3);
    expect(j.stages.reduce((s: number, x: { macs: number }) => s + x.macs, 0)).toBe(j.model.macs);
    expect(j.stages[0].outputs.length).toBeGreaterThan(0);
    for (const s of j.stages) expect(s.arenaBytes).toBeGreaterThanOrEqual(s.peakActivationBytes);
  });
  it('writes a readable table, Markdown, and files atomically', () => {
    const t = offramp(['cost', net]);
    expect(t.code).toBe(0);
    expect(t.stdout).toMatch(/MACs\s+1\.8\d G/);
    const out = path.join(dir, 'r.md');
    expect(offramp(['cost', net, '--md', '--no-nodes', '-o', out]).code).toBe(0);
    expect(fs.readFileSync(out, 'utf8')).toMatch(/^## Cost/);
    expect(fs.readdirSync(dir).filter((f) => f.endsWith('.tmp'))).toEqual([]);
  });
  it('is byte-identical across runs', () => {
    expect(offramp(['cost', net, '--json']).stdout).toBe(offramp(['cost', net, '--json']).stdout);
  });
});

describe('bad input', () => {
  it.each([
    ['truncated bytes', (f: string) => fs.writeFileSync(f, fs.readFileSync(net).subarray(0, 5000)), /not a valid ONNX model/],
    ['random bytes', (f: string) => fs.writeFileSync(f, Buffer.from(Array.from({ length: 300 }, (_, i) => (i * 7919 + 13) % 256))), /not a valid ONNX model/],
    ['an empty file', (f: string) => fs.writeFileSync(f, ''), /empty/],
  ])('%s: one line naming the file, exit 1', (_name, make, msg) => {
    const f = path.join(dir, `bad-${_name.replace(/\W/g, '')}.onnx`);
    make(f);
    const r = offramp(['cost', f]);
    expect(r.code).toBe(1);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toContain(f);
    expect(r.stderr).toMatch(msg);
    expect(r.stdout).toBe('');
  });
  it('a cycle names the value', () => {
    const r = offramp(['cost', cyc]);
    expect(r.code).toBe(1);
    expect(r.stderr).toMatch(/cycle.*'(a|b)'/);
  });
  it('a missing file, and usage errors (exit 2)', () => {
    expect(offramp(['cost', path.join(dir, 'nope.onnx')])).toMatchObject({ code: 1, stderr: expect.stringMatching(/nope\.onnx: no such file/) });
    expect(offramp(['cost']).code).toBe(2);
    expect(offramp(['cost', net, '--dim', 'x']).code).toBe(2);
    expect(offramp(['cost', net, '--cuts', 'nothing']).code).toBe(2);
  });
  it('does not leave a report behind on failure', () => {
    const out = path.join(dir, 'never.json');
    offramp(['cost', cyc, '--json', '-o', out]);
    expect(fs.existsSync(out)).toBe(false);
  });
});

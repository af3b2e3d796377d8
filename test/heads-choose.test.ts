// Choosing each exit's head (lib/heads/choose.ts): the exitable share against a brute-force count over
// random draws, the worth and its tie-breaks, and graft choosing on the demo model (the invented scenario).
import { describe, expect, it } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { bestTrial, exitableShare, HEAD_CHOICES, worthOf, type HeadTrial } from '../lib/heads/choose.js';
import { headName } from '../lib/heads/spec.js';
import { mulberry32 } from '../lib/graph/build.js';
import { writeNpy } from '../lib/data/npy.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { offramp } from './helpers/cli.js';

describe('the exitable share', () => {
  it('is the longest most-confident prefix within the tolerance, as a brute-force count over every prefix finds', () => {
    const rnd = mulberry32(11);
    for (let draw = 0; draw < 300; draw++) {
      const n = 1 + Math.floor(rnd() * 60), k = 2 + Math.floor(rnd() * 5), tol = [0, 0.01, 0.1, 0.3][draw % 4];
      const logits = Float64Array.from({ length: n * k }, () => Math.round((rnd() * 6 - 3) * 4) / 4); // ties on purpose
      const teacher = Int32Array.from({ length: n }, () => Math.floor(rnd() * k));
      const rows = Int32Array.from({ length: n }, (_, i) => i).filter(() => rnd() < 0.8);
      // brute force: softmax top probability per row (the textbook form), sorted stably, every prefix checked
      const top = (r: number) => {
        const z = Array.from(logits.subarray(r * k, (r + 1) * k)), m = Math.max(...z);
        return { p: Math.exp(0) / z.reduce((a, v) => a + Math.exp(v - m), 0), arg: z.indexOf(m) };
      };
      const sorted = [...rows].map((r) => ({ r, ...top(r) })).sort((a, b) => b.p - a.p);
      let best = 0;
      for (let m = 1; m <= sorted.length; m++) {
        const wrong = sorted.slice(0, m).filter((x) => x.arg !== teacher[x.r]).length;
        if (wrong <= tol * m) best = m;
      }
      expect(exitableShare(logits, k, teacher, rows, tol)).toBe(rows.length ? best / rows.length : 0);
    }
  });
  it('worth is what the exit skips on the rows that leave, less the head every frame there pays; ties go to fewer parameters', () => {
    expect(worthOf(0.5, 1000, 100)).toBe(400);
    const t = (head: string, worth: number, params: number): HeadTrial => ({ head, worth, params, macs: 0, agreement: 0, exitable: 0 });
    expect(bestTrial([t('linear', 10, 50), t('grid:2', 30, 200), t('mlp:32', 30, 100)])).toBe(2);
    expect(bestTrial([t('linear', 10, 50), t('grid:2', 10, 50)])).toBe(0);
    expect(bestTrial([t('linear', 10, 50), { ...t('grid:4', 90, 900), tooLarge: true }])).toBe(0);
  });
});

describe('graft chooses a head per exit unless --head names one', () => {
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-choose-'));
  const model = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
  const s = samples(600, 5), x = path.join(tmp, 'x.npy'), y = path.join(tmp, 'y.npy');
  writeNpy(x, s.x, [600, 1, BINS, FRAMES]);
  writeNpy(y, s.y, [600]);

  it('records every head tried and picks the one worth most; naming that head fits the same head', () => {
    const r = offramp(['graft', model, '--at', '20%,50%', '--data', x, '--labels', y, '-o', path.join(tmp, 'g.onnx'), '--json']);
    expect(r.code, r.stderr).toBe(0);
    const j = JSON.parse(r.stdout);
    for (const e of j.exits) {
      const tried = e.choice.tried as HeadTrial[];
      expect(tried.map((t) => t.head)).toEqual(HEAD_CHOICES.map(headName));
      expect(e.head).toBe(tried[bestTrial(tried)].head);
      const mine = tried.find((t) => t.head === e.head)!;
      expect([mine.macs, mine.params, mine.agreement]).toEqual([e.macs, e.params, e.fit.agreement]);
      for (const t of tried) expect(t.exitable).toBeGreaterThanOrEqual(0);
    }
    const text = offramp(['graft', model, '--at', '20%,50%', '--data', x, '--labels', y, '-o', path.join(tmp, 'g2.onnx')]);
    expect(text.stdout).toMatch(/^heads chosen by the MACs they would save per frame/m);
    expect(text.stdout).toMatch(new RegExp(`^  exit-0: ${j.exits[0].head.replace(':', '\\:')}  \\(linear [\\d.]+ ?[KM]?, grid:2`, 'm'));
    // naming the chosen head (one --head for every exit) fits the same head, without a choice recorded
    if (j.exits.every((e: { head: string }) => e.head === j.exits[0].head)) {
      const named = offramp(['graft', model, '--at', '20%,50%', '--data', x, '--labels', y, '--head', j.exits[0].head, '-o', path.join(tmp, 'n.onnx'), '--json']);
      const nj = JSON.parse(named.stdout);
      expect(nj.exits.map((e: { choice?: unknown }) => e.choice)).toEqual([undefined, undefined]);
      expect(nj.exits.map((e: { fit: unknown }) => e.fit)).toEqual(j.exits.map((e: { fit: unknown }) => e.fit));
    }
  });
  it('a head with more parameters than the layers after its cut is not chosen', () => {
    // after /b4/b4.2/Relu the demo model holds only its classifier: 64 × 5 weights and 5 biases (the file's own initializers)
    const r = offramp(['graft', model, '--cuts', '/b4/b4.2/Relu_output_0', '--data', x, '--labels', y, '-o', path.join(tmp, 'late.onnx'), '--json']);
    expect(r.code, r.stderr).toBe(0);
    const tried = JSON.parse(r.stdout).exits[0].choice.tried as HeadTrial[];
    expect(JSON.parse(r.stdout).exits[0].head).toBe('linear');
    for (const t of tried) expect(!!t.tooLarge).toBe(t.head !== 'linear' && t.params > 64 * 5 + 5);
    expect(tried.filter((t) => t.tooLarge).length).toBeGreaterThan(0);
  });
  it('--head linear fits only that head and records no choice', () => {
    const r = offramp(['graft', model, '--at', '20%', '--data', x, '--labels', y, '--head', 'linear', '-o', path.join(tmp, 'l.onnx'), '--json']);
    expect(r.code, r.stderr).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.exits[0].head).toBe('linear');
    expect(j.exits[0].choice).toBeUndefined();
    expect(offramp(['graft', model, '--at', '20%', '--data', x, '--head', 'linear', '-o', path.join(tmp, 'l2.onnx')]).stdout).not.toMatch(/heads chosen/);
  });
});

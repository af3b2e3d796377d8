// A small grafted, split and tuned demo model in a scratch folder, shared by the robustness tests:
// every case there runs the CLI as a user would and checks what it left on disk.
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { expect } from 'vitest';
import { samples, BINS, FRAMES } from '../../scripts/demo-data.js';
import { writeNpy } from '../../lib/data/npy.js';

export const DEMO = path.resolve(import.meta.dirname, '../../models-demo/fan-monitor.onnx');
export const ROWS = 120;

export interface Fixture { dir: string; model: string; x: string; y: string; grafted: string; split: string }

/** The demo model copied into a fresh folder, 120 labelled rows, a grafted model with two exits, its split, tuned. */
export async function makeFixture(prefix: string): Promise<Fixture> {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), `offramp-${prefix}-`));
  const model = path.join(dir, 'model.onnx');
  fs.copyFileSync(DEMO, model);
  const s = samples(ROWS, 5);
  const x = path.join(dir, 'x.npy'), y = path.join(dir, 'y.npy');
  writeNpy(x, s.x, [ROWS, 1, BINS, FRAMES]);
  writeNpy(y, s.y, [ROWS]);
  const grafted = path.join(dir, 'grafted.onnx'), split = path.join(dir, 'split');
  for (const args of [['graft', model, '--at', '10%,70%', '--data', x, '--labels', y, '-o', grafted], ['split', grafted, '-o', split], ['tune', split, '--data', x, '--labels', y]]) {
    const r = await cli(args);
    expect(r.code, r.stderr).toBe(0);
  }
  return { dir, model, x, y, grafted, split };
}

export const sha = (file: string) => crypto.createHash('sha256').update(fs.readFileSync(file)).digest('hex');

/** SHA-256 of every file under `dir` (recursively), by relative path. */
export function snapshot(dir: string): Record<string, string> {
  const out: Record<string, string> = {};
  const walk = (d: string) => {
    for (const n of fs.readdirSync(d).sort()) {
      const p = path.join(d, n), st = fs.lstatSync(p);
      if (st.isDirectory()) walk(p);
      else if (st.isSymbolicLink()) out[path.relative(dir, p)] = `-> ${fs.readlinkSync(p)}`;
      else if (st.isFile()) out[path.relative(dir, p)] = sha(p);
    }
  };
  walk(dir);
  return out;
}

/** One line on stderr, no stack, no "internal error", and the exit code asked for. */
export function oneLine(r: { code: number; stderr: string }, code: number, ...has: (string | RegExp)[]): void {
  const lines = r.stderr.trim().split('\n');
  expect(lines, r.stderr).toHaveLength(1);
  expect(r.stderr).not.toMatch(/internal error|\s+at .+:\d+:\d+/);
  for (const h of has) expect(r.stderr).toMatch(h);
  expect(r.code, r.stderr).toBe(code);
}

/**
 * The CLI in this process (the same `main` bin/offramp.js runs), stdout and stderr captured: a spawn per
 * case would load Node and onnxruntime again each time.
 */
export async function cli(args: string[]): Promise<{ code: number; stdout: string; stderr: string }> {
  const { main } = await import('../../lib/cli/main.js');
  let stdout = '', stderr = '';
  const out = process.stdout.write.bind(process.stdout), err = process.stderr.write.bind(process.stderr);
  process.stdout.write = ((s: string | Uint8Array) => { stdout += String(s); return true; }) as typeof process.stdout.write;
  process.stderr.write = ((s: string | Uint8Array) => { stderr += String(s); return true; }) as typeof process.stderr.write;
  try { return { code: await main(args), stdout, stderr }; } finally { process.stdout.write = out; process.stderr.write = err; }
}

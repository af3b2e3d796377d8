// Capture on worker threads: each thread its own chain (single-threaded sessions) over a contiguous range
// of rows; the cache must be the one thread's, byte for byte (onnxruntime computes a row the same way
// whichever session runs it: the same file, options and batch size). Progress adds up to the rows, and a
// bad row stops the threaded capture with the error one thread gives. The workers run the compiled module
// (dist/, built by `npm test`'s tsc) while this file runs the sources: the two builds must agree too.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { loadChain, type Chain } from '../lib/run/chain.js';
import { captureCache } from '../lib/tune/chain-capture.js';

const MODEL = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
const BUILT = path.resolve(import.meta.dirname, '../dist/lib/tune/capture-worker.js');
let dir: string, x: string, chain: Chain;
const N = 301;

beforeAll(async () => {
  expect(fs.existsSync(BUILT), 'the worker module is built (npm run build)').toBe(true);
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-capture-'));
  const s = samples(N, 4);
  x = path.join(dir, 'x.npy');
  writeNpy(x, s.x, [N, 1, BINS, FRAMES]);
  writeNpy(path.join(dir, 'y.npy'), s.y, [N]);
  const grafted = path.join(dir, 'g.onnx');
  expect(offramp(['graft', MODEL, '--at', '10%,40%,70%', '--data', x, '--labels', path.join(dir, 'y.npy'), '-o', grafted]).code).toBe(0);
  expect(offramp(['split', grafted, '-o', path.join(dir, 'split')]).code).toBe(0);
  chain = await loadChain(path.join(dir, 'split'));
});
afterAll(async () => { await chain?.release(); fs.rmSync(dir, { recursive: true, force: true }); });

describe('threaded capture', () => {
  it('gives the one-thread cache byte for byte, whatever the thread count; progress reaches every row', async () => {
    const one = await captureCache(chain, x, undefined, undefined, { threads: 1 });
    expect(one.cache.exits).toBe(3);
    expect(one.threads).toBe(1);
    for (const threads of [2, 3, 7]) {
      const seen: number[] = [];
      const got = await captureCache(chain, x, undefined, (n) => seen.push(n), { threads });
      expect(Buffer.from(got.cache.logits.buffer).equals(Buffer.from(one.cache.logits.buffer))).toBe(true);
      expect(got.cache.labels).toEqual(one.cache.labels);
      expect(got.layout).toEqual(one.layout);
      expect(got.threads).toBe(threads);
      expect(seen.at(-1)).toBe(N);
      expect(seen.every((v, i) => i === 0 || v > seen[i - 1])).toBe(true);
    }
  });

  it('stops on a bad row with the error one thread gives, naming the file and the row', async () => {
    const s = samples(N, 5);
    s.x[250 * BINS * FRAMES + 3] = NaN;   // in the last thread's range
    const bad = path.join(dir, 'bad.npy');
    writeNpy(bad, s.x, [N, 1, BINS, FRAMES]);
    const msg = async (threads: number) => captureCache(chain, bad, undefined, undefined, { threads }).then(() => 'no error', (e: Error & { line?: () => string }) => e.line?.() ?? e.message);
    const single = await msg(1);
    expect(single).toMatch(/bad\.npy: row 250: value NaN/);
    expect(await msg(3)).toBe(single);
    await expect(captureCache(chain, x, undefined, undefined, { threads: 0 })).rejects.toThrow(/threads/);
  });
});

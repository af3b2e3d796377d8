// The Fashion-MNIST fixture: a small CNN trained and exported by PyTorch
// (scripts/train-fmnist.py). PyTorch's own test-set accuracy and logits in
// reference.json are the reference; onnxruntime-node must reproduce them from
// the IDX files of Debian's dataset-fashion-mnist.
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import zlib from 'node:zlib';
import { describe, it, expect } from 'vitest';
import { openSession, runSession, tensorFromData } from '../lib/runtime/ort.js';
import { readIdx } from '../lib/data/idx.js';
import { FLOAT } from '../lib/onnx/dtype.js';
import { OfframpError } from '../lib/errors.js';
import { requireFmnist, loadFmnist, FMNIST_FIXTURE } from './helpers/fmnist.js';

const have = requireFmnist();
const ONNX = path.join(FMNIST_FIXTURE, 'cnn.onnx');
const REF = JSON.parse(fs.readFileSync(path.join(FMNIST_FIXTURE, 'reference.json'), 'utf8')) as {
  testAccuracy: number; testCount: number; onnxSha256: string; firstLogits: number[][];
};

describe.runIf(have)('Fashion-MNIST CNN fixture', () => {
  it('the IDX test files: 10k 28x28 images in [0,1], labels 0..9, 1000 per class', () => {
    const { n, images, labels } = loadFmnist('test');
    expect(n).toBe(10_000);
    expect(images.length).toBe(n * 28 * 28);
    let lo = Infinity, hi = -Infinity;
    for (const v of images) { lo = Math.min(lo, v); hi = Math.max(hi, v); }
    expect([lo, hi]).toEqual([0, 1]);
    const per = new Array(10).fill(0);
    for (const l of labels) per[l]++;
    expect(per).toEqual(new Array(10).fill(1000)); // the test set is balanced (dataset description; common practice)
  });

  it('onnxruntime reproduces PyTorch\'s test accuracy and logits', async () => {
    expect(crypto.createHash('sha256').update(fs.readFileSync(ONNX)).digest('hex')).toBe(REF.onnxSha256);
    const { n, images, labels } = loadFmnist('test');
    const s = await openSession(fs.readFileSync(ONNX), ONNX);
    let correct = 0;
    const B = 1000, per = 28 * 28;
    try {
      for (let i = 0; i < n; i += B) {
        const m = Math.min(B, n - i);
        const out = await runSession(s, { input: tensorFromData(FLOAT, [m, 1, 28, 28], images.subarray(i * per, (i + m) * per)) }, ONNX);
        const logits = out.logits.data as Float32Array;
        expect(out.logits.dims).toEqual([m, 10]);
        if (i === 0) {
          // Same float32 graph, different kernels: agreement to a few ulps of the logits' size.
          for (let r = 0; r < REF.firstLogits.length; r++) {
            for (let k = 0; k < 10; k++) expect(Math.abs(logits[r * 10 + k] - REF.firstLogits[r][k])).toBeLessThan(1e-4);
          }
        }
        for (let r = 0; r < m; r++) {
          let best = 0;
          for (let k = 1; k < 10; k++) if (logits[r * 10 + k] > logits[r * 10 + best]) best = k;
          if (best === labels[i + r]) correct++;
        }
      }
    } finally { await s.release(); }
    expect(n).toBe(REF.testCount);
    expect(Math.abs(correct / n - REF.testAccuracy)).toBeLessThanOrEqual(0.001); // within 0.1 percentage point
  });
});

describe('IDX reader', () => {
  const idx = (type: number, dims: number[], body: number[]) => {
    const h = Buffer.alloc(4 + 4 * dims.length);
    h[2] = type; h[3] = dims.length;
    dims.forEach((d, i) => h.writeUInt32BE(d, 4 + 4 * i));
    return Buffer.concat([h, Buffer.from(body)]);
  };
  it('reads big-endian values, plain or gzipped', () => {
    const d = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-idx-'));
    const f = path.join(d, 'a.idx');
    fs.writeFileSync(f, idx(0x0b, [2], [0xff, 0xfe, 0x01, 0x02]));
    expect(readIdx(f)).toEqual({ type: 0x0b, dims: [2], data: Int16Array.from([-2, 258]) });
    fs.writeFileSync(f, zlib.gzipSync(idx(0x08, [2, 2], [0, 1, 254, 255])));
    expect(Array.from(readIdx(f).data)).toEqual([0, 1, 254, 255]);
    fs.writeFileSync(f, idx(0x09, [3], [0xff, 0x80, 0x7f]));
    expect(Array.from(readIdx(f).data)).toEqual([-1, -128, 127]);
    const bad = (buf: Buffer, re: RegExp) => {
      fs.writeFileSync(f, buf);
      try { readIdx(f); expect.unreachable(); } catch (e) {
        expect(e).toBeInstanceOf(OfframpError);
        expect((e as OfframpError).line()).toMatch(re);
        expect((e as OfframpError).line().startsWith(f)).toBe(true);
      }
    };
    bad(Buffer.from('hello world'), /bad magic/);
    bad(idx(0x08, [10, 10], [1, 2, 3]), /truncated: dims \[10, 10\] need 112 bytes, file has 15/);
    bad(idx(0x07, [1], [1]), /unknown IDX type code 0x7/);
    bad(Buffer.from([0x1f, 0x8b, 1, 2, 3]), /bad gzip data/);
    fs.rmSync(d, { recursive: true });
  });
});

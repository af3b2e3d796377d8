// Fashion-MNIST from Debian's dataset-fashion-mnist package (gzipped IDX files).
// Under CI its absence is a failure, not a skip: the real-data checks must run.
import fs from 'node:fs';
import path from 'node:path';
import { readIdxImages, readIdxLabels } from '../../lib/data/idx.js';

export const FMNIST = process.env.OFFRAMP_FMNIST ?? '/usr/share/datasets/fashion-mnist';
export const FMNIST_FIXTURE = path.join(path.dirname(new URL(import.meta.url).pathname), '..', 'fixtures', 'fmnist');
const file = (split: 'train' | 'test', kind: 'images' | 'labels') =>
  path.join(FMNIST, `${split === 'test' ? 't10k' : 'train'}-${kind}-${kind === 'images' ? 'idx3' : 'idx1'}-ubyte.gz`);
export const haveFmnist = fs.existsSync(file('test', 'images'));

export function requireFmnist(): boolean {
  if (haveFmnist) return true;
  if (process.env.CI) throw new Error(`Fashion-MNIST missing at ${FMNIST}: apt-get install dataset-fashion-mnist`);
  return false;
}

/** Images as [N, 1, 28, 28] float32 in [0,1] (the fixture model's input), labels 0..9; the first `limit` samples if given. */
export function loadFmnist(split: 'train' | 'test', limit?: number): { n: number; images: Float32Array; labels: Int32Array } {
  const im = readIdxImages(file(split, 'images')), lb = readIdxLabels(file(split, 'labels'));
  if (lb.length !== im.count) throw new Error(`Fashion-MNIST ${split}: ${im.count} images but ${lb.length} labels`);
  const n = Math.min(limit ?? im.count, im.count), per = im.rows * im.cols;
  return { n, images: im.data.subarray(0, n * per), labels: lb.subarray(0, n) };
}

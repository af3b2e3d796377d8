// INVENTED DEMO SCENARIO — no real machine, site or data behind it.
// A battery-powered vibration node sits on a ventilation fan and classifies the
// fan's condition every quarter second from a short accelerometer spectrogram
// (32 frequency bins × 32 time frames, log magnitude). Conditions persist for
// minutes, so consecutive frames are nearly the same picture.
//
// This generator synthesises such spectrograms deterministically from a seed:
// harmonic lines of the shaft speed whose pattern depends on the condition,
// scaled by a severity (low severity = hard to tell from normal), over a noise
// floor. Same seed → byte-identical .npy files.
import path from 'node:path';
import fs from 'node:fs';
import { mulberry32 } from '../lib/graph/build.js';
import { writeNpy } from '../lib/data/npy.js';

export const CLASSES = ['normal', 'imbalance', 'misalignment', 'bearing-wear', 'looseness'] as const;
export const BINS = 32, FRAMES = 32;
const HZ_PER_BIN = 25; // 0–800 Hz over 32 bins
const BLADES = 6;

interface Scene { cls: number; rpm: number; severity: number; floor: number; shaft: number; blade: number }

function gauss(rand: () => number): number {
  const u = Math.max(rand(), 1e-12), v = rand();
  return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
}

function randomScene(rand: () => number, cls: number): Scene {
  // Severity skews low: many faults are barely developed, which is what makes some frames hard.
  const r = rand();
  return { cls, rpm: 900 + 600 * rand(), severity: 0.03 + 0.97 * r * r, floor: 0.03 + 0.07 * rand(), shaft: 0.2 + 0.5 * rand(), blade: 0.3 + 0.5 * rand() };
}

/** One spectrogram [BINS, FRAMES] of a scene; `jitter` varies speed and noise per frame. */
function spectrogram(s: Scene, rand: () => number, out: Float32Array, offset: number, noise = 1): void {
  const f0 = s.rpm / 60;
  const lines: [number, number][] = [[1, s.shaft], [BLADES, s.blade]]; // shaft 1× and blade-pass, present in every condition
  const k = s.severity;
  switch (CLASSES[s.cls]) {
    case 'imbalance': lines.push([1, 1.6 * k]); break;
    case 'misalignment': lines.push([2, 1.2 * k], [3, 0.7 * k]); break;
    case 'bearing-wear': lines.push([5.4, 0.9 * k], [10.8, 0.6 * k], [16.2, 0.4 * k]); break;
    case 'looseness': for (let h = 1; h <= 10; h++) lines.push([h, 0.5 * k / Math.sqrt(h)]); break;
  }
  for (let t = 0; t < FRAMES; t++) {
    const ft = f0 * (1 + 0.01 * gauss(rand) * noise);
    const impulse = CLASSES[s.cls] === 'looseness' && rand() < 0.15 * k ? 0.4 * k : 0;
    const hf = CLASSES[s.cls] === 'bearing-wear' ? 0.25 * k * (0.6 + 0.4 * Math.sin(t / 3)) : 0;
    for (let b = 0; b < BINS; b++) {
      const f = (b + 0.5) * HZ_PER_BIN;
      let mag = s.floor * (1 + 0.8 * Math.abs(gauss(rand)) * noise) + impulse + (b >= 20 ? hf : 0);
      for (const [h, a] of lines) { const d = (f - h * ft) / (HZ_PER_BIN * 0.6); mag += a * Math.exp(-d * d); }
      out[offset + b * FRAMES + t] = Math.log10(1 + 10 * mag);
    }
  }
}

/** Independent samples, classes balanced. */
export function samples(n: number, seed: number): { x: Float32Array; y: BigInt64Array } {
  const rand = mulberry32(seed);
  const x = new Float32Array(n * BINS * FRAMES), y = new BigInt64Array(n);
  for (let i = 0; i < n; i++) {
    const cls = i % CLASSES.length;
    spectrogram(randomScene(rand, cls), rand, x, i * BINS * FRAMES);
    y[i] = BigInt(cls);
  }
  return { x, y };
}

/**
 * A stream in temporal order: scenes of 10–60 frames (2.5 s – 15 s), each frame the scene with fresh noise.
 * Certified stream tuning counts scenes, not frames, so the recording holds several hundred of them.
 */
export function stream(n: number, seed: number): { x: Float32Array; y: BigInt64Array; segment: BigInt64Array } {
  const rand = mulberry32(seed);
  const x = new Float32Array(n * BINS * FRAMES), y = new BigInt64Array(n), segment = new BigInt64Array(n);
  let i = 0, id = 0;
  while (i < n) {
    const s = randomScene(rand, Math.floor(rand() * CLASSES.length));
    const len = 10 + Math.floor(rand() * 51);
    for (let j = 0; j < len && i < n; j++, i++) {
      spectrogram(s, rand, x, i * BINS * FRAMES);
      y[i] = BigInt(s.cls);
      segment[i] = BigInt(id);
    }
    id++;
  }
  return { x, y, segment };
}

/** About 690 scenes: enough for a bound of a point or two on the drop, a scene counting once. */
export const STREAM_FRAMES = 24000, LATER_FRAMES = 24000;

export function writeDemoData(dir: string): string[] {
  fs.mkdirSync(dir, { recursive: true });
  const shape = (n: number) => [n, 1, BINS, FRAMES];
  const files: string[] = [];
  const put = (name: string, data: Float32Array | BigInt64Array, dims: number[]) => { const f = path.join(dir, name); writeNpy(f, data, dims); files.push(f); };
  const train = samples(8000, 101), calib = samples(6000, 202), val = samples(2000, 303), st = stream(STREAM_FRAMES, 404), later = stream(LATER_FRAMES, 505);
  put('train-x.npy', train.x, shape(8000)); put('train-y.npy', train.y, [8000]);
  put('calib-x.npy', calib.x, shape(6000)); put('calib-y.npy', calib.y, [6000]);
  put('val-x.npy', val.x, shape(2000)); put('val-y.npy', val.y, [2000]);
  put('stream-x.npy', st.x, shape(STREAM_FRAMES)); put('stream-y.npy', st.y, [STREAM_FRAMES]); put('stream-segments.npy', st.segment, [STREAM_FRAMES]);
  // a later recording of the same node, never tuned on: where the stream policy's promise is checked
  put('later-x.npy', later.x, shape(LATER_FRAMES)); put('later-y.npy', later.y, [LATER_FRAMES]);
  return files;
}

if (process.argv[1]?.endsWith('demo-data.js')) {
  const dir = process.argv[2] ?? 'models-demo/data';
  for (const f of writeDemoData(dir)) console.log(f);
}

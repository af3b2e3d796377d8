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

// Fixed-point requantization (lib/kernels/requant.ts) against the multiplier of Jacob et al. 2018, section
// 2.2, and one rounding of the exact product, as written apart with NumPy and exact Python integers (scripts/make-requant-fixtures.py); the C twin
// (offramp_requant.h) is compiled with gcc and fed the same cases.
import { describe, it, expect } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { mulInitializer, quantizeMultiplier, requantize } from '../lib/kernels/requant.js';
import { firmwareSourceDirs } from '../lib/firmware/write.js';

const cases = JSON.parse(fs.readFileSync('test/fixtures/requant/cases.json', 'utf8')) as {
  multipliers: { real: number; mult: number; shift: number }[];
  requantize: { acc: number; mult: number; shift: number; y: number }[];
  refused: number[];
};
const GCC = spawnSync('gcc', ['--version']).status === 0;
if (!GCC && process.env.CI) throw new Error('gcc is missing: the requantization C check needs it under CI');

describe('fixed-point requantization against the NumPy reference', () => {
  it('multiplier and shift of every real multiplier', () => {
    for (const c of cases.multipliers) expect(quantizeMultiplier(c.real), `M = ${c.real}`).toEqual({ mult: c.mult, shift: c.shift });
    for (const r of cases.refused) expect(() => quantizeMultiplier(r), `M = ${r}`).toThrow(/too large/);
    expect(cases.multipliers.length).toBeGreaterThan(400);
    expect(cases.refused.length).toBeGreaterThan(0);
  });
  it('the exact product rounded once, ties to even, saturated; ties of both signs and every shift', () => {
    for (const c of cases.requantize) expect(requantize(c.acc, c), `${c.acc} · (${c.mult}, ${c.shift})`).toBe(c.y);
  });
  it.skipIf(!GCC)('offramp_requant.h gives the same integers', () => {
    const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-requant-'));
    try {
      const rows = cases.requantize.map((c) => `{ ${c.acc === -2147483648 ? '(-2147483647 - 1)' : c.acc}, ${mulInitializer(c)} }`);
      const src = `#include <stdio.h>\n#include "offramp_requant.h"\ntypedef struct { int32_t acc; offramp_mul_t m; } row_t;\nstatic const row_t rows[] = {\n${rows.join(',\n')}\n};\nint main(void) { unsigned i; for (i = 0; i < sizeof rows / sizeof rows[0]; i++) printf("%ld\\n", (long)offramp_requantize(rows[i].acc, &rows[i].m)); return 0; }\n`;
      fs.writeFileSync(path.join(tmp, 'main.c'), src);
      const exe = path.join(tmp, 'main');
      const cc = spawnSync('gcc', ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-I', firmwareSourceDirs()[0], path.join(tmp, 'main.c'), '-o', exe], { encoding: 'utf8' });
      expect(cc.status, cc.stderr).toBe(0);
      const out = spawnSync(exe, { encoding: 'utf8' }).stdout.trim().split('\n').map(Number);
      expect(out).toEqual(cases.requantize.map((c) => c.y));
    } finally { fs.rmSync(tmp, { recursive: true, force: true }); }
  });
});

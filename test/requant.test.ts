// Fixed-point requantization (lib/kernels/requant.ts) against the formulas of Jacob et al. 2018, section
// 2.2, as written apart with NumPy and exact Python integers (scripts/make-requant-fixtures.py); the C twin
// (offramp_requant.h) is compiled with gcc and fed the same cases.
import { describe, it, expect } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { highMul, quantizeMultiplier, requantize, roundShift } from '../lib/kernels/requant.js';
import { firmwareSourceDirs } from '../lib/firmware/write.js';

const cases = JSON.parse(fs.readFileSync('test/fixtures/requant/cases.json', 'utf8')) as {
  multipliers: { real: number; mult: number; shift: number }[];
  requantize: { acc: number; mult: number; shift: number; y: number }[];
  highMul: { a: number; b: number; y: number }[];
  roundShift: { x: number; e: number; y: number }[];
};
const GCC = spawnSync('gcc', ['--version']).status === 0;
if (!GCC && process.env.CI) throw new Error('gcc is missing: the requantization C check needs it under CI');

describe('fixed-point requantization against the NumPy reference', () => {
  it('multiplier and shift of every real multiplier', () => {
    for (const c of cases.multipliers) expect(quantizeMultiplier(c.real), `M = ${c.real}`).toEqual({ mult: c.mult, shift: c.shift });
    expect(cases.multipliers.length).toBeGreaterThan(400);
  });
  it('rounding doubling high multiply, rounding shift and their composition, ties included', () => {
    for (const c of cases.highMul) expect(highMul(c.a, c.b), `${c.a}·${c.b}`).toBe(c.y);
    for (const c of cases.roundShift) expect(roundShift(c.x, c.e), `${c.x} >> ${c.e}`).toBe(c.y);
    for (const c of cases.requantize) expect(requantize(c.acc, c), `${c.acc} · (${c.mult}, ${c.shift})`).toBe(c.y);
  });
  it.skipIf(!GCC)('offramp_requant.h gives the same integers', () => {
    const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-requant-'));
    try {
      const rows = cases.requantize.map((c) => `{ ${c.acc === -2147483648 ? '(-2147483647 - 1)' : c.acc}, { ${c.mult === 0 ? 0 : c.mult === 2147483648 ? 0 : c.mult}, ${c.shift} } }`);
      const src = `#include <stdio.h>\n#include "offramp_requant.h"\ntypedef struct { int32_t acc; offramp_mul_t m; } row_t;\nstatic const row_t rows[] = {\n${rows.join(',\n')}\n};\nint main(void) { unsigned i; for (i = 0; i < sizeof rows / sizeof rows[0]; i++) printf("%ld\\n", (long)offramp_requantize(rows[i].acc, rows[i].m)); return 0; }\n`;
      fs.writeFileSync(path.join(tmp, 'main.c'), src);
      const exe = path.join(tmp, 'main');
      const cc = spawnSync('gcc', ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-I', firmwareSourceDirs()[0], path.join(tmp, 'main.c'), '-o', exe], { encoding: 'utf8' });
      expect(cc.status, cc.stderr).toBe(0);
      const out = spawnSync(exe, { encoding: 'utf8' }).stdout.trim().split('\n').map(Number);
      expect(out).toEqual(cases.requantize.map((c) => c.y));
    } finally { fs.rmSync(tmp, { recursive: true, force: true }); }
  });
});

// The measuring harness on emulated Cortex-M cores (QEMU 7.2: mps2-an386 = M4F, mps2-an500 = M7,
// mps3-an547 = M55). The instruction counter is checked against Thumb-2 loops whose executed
// instruction counts follow from the Arm architecture's instruction behaviour (Armv7-M Architecture
// Reference Manual, chapter A7's instruction descriptions and its conditional execution rules, from
// memory: an instruction in an IT block whose condition fails still executes, as a NOP; each count is
// worked out beside its loop in fixtures/measure/loops.S); flash and RAM are
// checked against binutils' `arm-none-eabi-size` of the same ELF. Needs Debian's gcc-arm-none-eabi,
// libnewlib-arm-none-eabi and qemu-system-arm: skipped without them, a failure under CI.
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { OfframpError } from '../lib/errors.js';
import { coreOf, frameProfiles, measureFirmware, readCountLog, readElf, toolchainStatus, type Measurement, type MeasureOptions } from '../lib/measure/index.js';

const status = toolchainStatus();
if (!status.ready && process.env.CI) throw new Error(`the measuring tests need the Arm toolchain under CI: ${status.message}`);
const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-measure-test-'));
process.env.OFFRAMP_CACHE = path.join(tmp, 'cache');
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));

const F = path.join(import.meta.dirname, 'fixtures', 'measure');
const base = (extra: Partial<MeasureOptions> = {}): MeasureOptions => ({
  core: 'm4f', sources: [path.join(F, 'lib.c')], driverSources: [path.join(F, 'loops.S'), path.join(F, 'main.c')], ...extra,
});
let dirs = 0;
const workDir = () => path.join(tmp, `run-${dirs++}`);

// Hand counts from loops.S (Arm instruction behaviour: each listed instruction executes once per pass).
const EXPECTED = [
  { kind: 'stage', index: 0, instructions: 0 }, // empty region
  { kind: 'stage', index: 1, instructions: 2 + 2 * 1000 }, // movw, movt, N × (subs, bne)
  { kind: 'stage', index: 2, instructions: 1 + 7 * (3 + 2 * 13) }, // nested 7 × 13
  { kind: 'stage', index: 3, instructions: 1 + 5 * 50 }, // IT block with one failing instruction per pass
  { kind: 'stage', index: 4, instructions: 1 + 4 * 100 }, // 100 calls of a leaf (bl, bx)
  { kind: 'decision', index: 1, instructions: 1 + 2 * 20 },
  { kind: 'stage', index: 5, instructions: 2 }, // movs, cbz taken
  { kind: 'frame', index: 1000, instructions: 41 + 2 }, // the two regions inside it, nothing else
];

function size(elf: string, format: 'B' | 'A'): string {
  const r = spawnSync('arm-none-eabi-size', [`-${format}`, elf], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(r.stderr);
  return r.stdout;
}

describe('without the toolchain', () => {
  it('names the three Debian packages in one line when the tools are missing', () => {
    const s = toolchainStatus({ PATH: '' });
    expect(s.ready).toBe(false);
    expect(s.missing).toEqual(expect.arrayContaining(['arm-none-eabi-gcc', 'qemu-system-arm']));
    expect(s.message).toContain('gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm');
    expect(s.message).not.toContain('\n');
  });

  it('refuses m0plus in one line: QEMU 7.2 has no Cortex-M0+ machine', () => {
    const e = (() => { try { coreOf('m0plus'); } catch (err) { return err; } })() as OfframpError;
    expect(e).toBeInstanceOf(OfframpError);
    expect(e.kind).toBe('usage');
    expect(e.line()).toMatch(/^core: QEMU 7\.2 has no Cortex-M0\+ machine/);
    expect(() => coreOf('m3')).toThrow(/core: "m3" is not a measured core/);
  });

  it('checks its options and names the one at fault', async () => {
    await expect(measureFirmware({ core: 'm4f', sources: [] })).rejects.toThrow(/^sources: a non-empty array/);
    await expect(measureFirmware(base({ stackBytes: 1000 }))).rejects.toThrow(/^stackBytes: /);
    await expect(measureFirmware(base({ defines: ['1BAD'] }))).rejects.toThrow(/^defines\[0\]: /);
    await expect(measureFirmware(base({ core: 'm0plus' }))).rejects.toMatchObject({ kind: 'usage' });
    await expect(measureFirmware(base({ sources: [path.join(F, 'missing.c')] }))).rejects.toThrow(/sources\[0\]: no such file/);
  });

  it('refuses what is not a 32-bit little-endian Arm ELF file, naming it', () => {
    expect(() => readElf(Buffer.from('not an elf file at all, just text of some length to pass the header size'), 'x.elf')).toThrow(/not an ELF file/);
    // ELF magic, 64-bit class (System V ABI e_ident[EI_CLASS] = 2).
    const elf64 = Buffer.alloc(64); elf64.write('\x7fELF', 0, 'latin1'); elf64[4] = 2; elf64[5] = 1;
    expect(() => readElf(elf64, 'y.elf')).toThrow(/not a 32-bit little-endian/);
    expect(() => readElf('path' as unknown as Buffer)).toThrow(/^buf: /);
  });

  it('pairs markers and subtracts one calibration per marker (worked example)', () => {
    // Calibration 9; frame 0 from 100 to 200 holds stage 1 from 120 to 150, which holds kernel step 0 from
    // 125 to 140: step = 15 − 9 = 6, stage = 30 − 9 × (1 + 2 inner markers) = 3, frame = 100 − 9 × (1 + 4) = 55;
    // frame 1 from 300 to 340, empty: 40 − 9 = 31.
    const log = 'E 7 0 10\nE 8 0 19\nE 5 0 100\nE 1 1 120\nE 9 0 125\nE 10 0 140\nE 2 1 150\nE 6 0 200\nE 5 1 300\nE 6 1 340\nT 400\n';
    const c = readCountLog(log, true);
    expect(c.calibration).toBe(9);
    expect(c.total).toBe(400);
    expect(c.frames).toBe(2);
    expect(c.occurrences).toEqual([
      { kind: 'step', index: 0, frame: 0, instructions: 6, stage: 1 },
      { kind: 'stage', index: 1, frame: 0, instructions: 3 },
      { kind: 'frame', index: 0, frame: 0, instructions: 55 },
      { kind: 'frame', index: 1, frame: 1, instructions: 31 },
    ]);
    expect(c.regions).toEqual([
      { kind: 'stage', index: 1, count: 1, total: 3, min: 3, max: 3 },
      { kind: 'step', index: 0, stage: 1, count: 1, total: 6, min: 6, max: 6 },
      { kind: 'frame', index: -1, count: 2, total: 86, min: 31, max: 55 },
    ]);
    expect(frameProfiles(c.occurrences)).toEqual([
      { frame: 0, index: 0, instructions: 55, stages: [{ index: 1, instructions: 3 }], decisions: [], steps: [{ stage: 1, index: 0, instructions: 6 }] },
      { frame: 1, index: 1, instructions: 31, stages: [], decisions: [], steps: [] },
    ]);
    expect(() => readCountLog('E 7 0 10\nE 8 0 19\nE 1 1 20\nE 4 1 30\nT 40\n', true)).toThrow(/end of decision 1 inside stage 1/);
    expect(() => readCountLog('E 7 0 10\nE 8 0 19\nE 1 1 20\nT 40\n', true)).toThrow(/stage 1 still open/);
  });
});

describe.skipIf(!status.ready)('on the emulated cores', () => {
  const runs = new Map<string, Measurement>();

  for (const core of ['m4f', 'm7', 'm55'] as const) {
    it(`counts the known loops exactly on ${core}`, async () => {
      const m = await measureFirmware(base({ core, workDir: workDir() }));
      runs.set(core, m);
      expect(m.exitCode).toBe(3);
      // 1.5 × (0.5 + 1 + 1.5 + 2) = 7.5, truncated: the float code ran, so the FPU was on.
      expect(m.stdout).toBe('scale 7\n');
      // trace.c: bx lr | movs | movs | bl | ubfx | orr | movw | movt | str between two stores.
      expect(m.calibration).toBe(9);
      expect(m.occurrences.map(({ kind, index, instructions }) => ({ kind, index, instructions }))).toEqual(EXPECTED);
      expect(m.occurrences.map((o) => o.frame)).toEqual([-1, -1, -1, -1, -1, 0, 0, 0]);
      expect(m.frames).toBe(1);
      expect(frameProfiles(m.occurrences)).toEqual([
        { frame: 0, index: 1000, instructions: 43, stages: [{ index: 5, instructions: 2 }], decisions: [{ index: 1, instructions: 41 }], steps: [] },
      ]);
    });
  }

  it('gives byte-identical figures on a second run', async () => {
    const first = runs.get('m4f') ?? await measureFirmware(base({ workDir: workDir() }));
    const again = await measureFirmware(base({ workDir: workDir() }));
    const strip = ({ elf: _elf, ...rest }: Measurement) => JSON.stringify(rest);
    expect(strip(again)).toBe(strip(first));
  });

  it('counts the whole run as QEMU\'s own execution log does', () => {
    // Without the plugin: `-d in_asm,exec,nochain` logs each translated block's instructions and
    // every block executed (chaining off, so none is skipped); their sum is the run's instructions.
    const m = runs.get('m4f')!;
    const log = path.join(tmp, 'exec.log');
    const r = spawnSync('qemu-system-arm', ['-M', 'mps2-an386', '-nographic', '-monitor', 'none', '-serial', 'none',
      '-semihosting-config', 'enable=on,target=native', '-kernel', m.elf!, '-d', 'in_asm,exec,nochain', '-D', log], { cwd: tmp, encoding: 'utf8' });
    expect(r.status).toBe(3);
    const lengths = new Map<number, number>();
    let block: number | undefined, n = 0, total = 0;
    const close = () => { if (block !== undefined) lengths.set(block, n); block = undefined; n = 0; };
    for (const line of fs.readFileSync(log, 'utf8').split('\n')) {
      const insn = /^0x([0-9a-f]+):\s+[0-9a-f]{4}/.exec(line);
      if (line.startsWith('IN:')) { close(); block = -1; }
      else if (insn && block !== undefined) { if (block === -1) block = parseInt(insn[1]!, 16); n++; }
      else if (line.startsWith('Trace ')) { close(); total += lengths.get(parseInt(line.split('[')[1]!.split('/')[1]!, 16))!; }
      else if (line.trim() === '') close();
    }
    fs.rmSync(log);
    expect(total).toBe(m.instructions);
  });

  it('reports flash and RAM as arm-none-eabi-size reads the same ELF', async () => {
    expect([...runs.keys()]).toEqual(['m4f', 'm7', 'm55']);
    for (const m of runs.values()) {
      // Berkeley format: text dec data bss dec hex filename.
      const [text, data, bss] = size(m.elf!, 'B').split('\n')[1]!.trim().split(/\s+/).map(Number) as [number, number, number];
      expect(m.size).toEqual({ text, data, bss });
      expect(m.flash.total).toBe(text + data);
      expect(m.ram.data + m.ram.bss).toBe(data + bss);
      expect(m.ram.total).toBe(data + bss + m.ram.stackPeak);
      // System V format: one line per section; the library's share is its .lib.* sections.
      const sec = new Map(size(m.elf!, 'A').split('\n').map((l) => l.trim().split(/\s+/)).filter((f) => f.length === 3).map((f) => [f[0]!, Number(f[1])]));
      const of = (...names: string[]) => names.reduce((a, n) => a + (sec.get(n) ?? 0), 0);
      expect(m.flash.library).toBe(of('.lib.text', '.lib.rodata', '.lib.data'));
      expect(m.ram.library).toBe(of('.lib.data', '.lib.bss'));
      // lib.c: weights 8 floats in rodata, measured_state 16 floats in bss, measured_gain 1 float in data.
      expect(of('.lib.rodata')).toBeGreaterThanOrEqual(32);
      expect(of('.lib.bss')).toBe(64);
      expect(of('.lib.data')).toBe(4);
      expect(of('.lib.text')).toBeGreaterThan(0);
    }
  });

  it('reads the ELF symbol table as binutils nm does', () => {
    const m = runs.get('m55')!;
    const r = spawnSync('arm-none-eabi-nm', ['-S', '--defined-only', m.elf!], { encoding: 'utf8' });
    expect(r.status).toBe(0);
    // nm -S: value, size, type letter, name, for symbols with a size.
    const nm = r.stdout.split('\n').map((l) => l.trim().split(/\s+/)).filter((f) => f.length === 4)
      .map(([v, sz, t, name]) => ({ name: name!, value: parseInt(v!, 16), size: parseInt(sz!, 16), global: t! === t!.toUpperCase() }));
    expect(nm.length).toBeGreaterThan(50);
    const elf = readElf(fs.readFileSync(m.elf!));
    for (const s of nm.filter((x) => x.global)) {
      const mine = elf.symbols.filter((x) => x.name === s.name && x.bind !== 0);
      expect(mine.length, s.name).toBe(1);
      // nm prints Thumb function addresses without bit 0, as the ELF for Arm ABI's T bit means.
      expect({ value: mine[0]!.type === 2 ? mine[0]!.value & ~1 : mine[0]!.value, size: mine[0]!.size }, s.name).toEqual({ value: s.value, size: s.size });
    }
  });

  it('finds the stack high-water mark by painting', async () => {
    const deep = await measureFirmware(base({ defines: ['DEEP_STACK'] }));
    const flat = runs.get('m4f')!;
    // loops_deep_stack stores 16 KiB below main's stack pointer; above it only the frames of the
    // reset → harness → main calls, a few words each.
    expect(deep.ram.stackPeak).toBeGreaterThanOrEqual(16384 + 8);
    expect(deep.ram.stackPeak).toBeLessThanOrEqual(16384 + 64);
    expect(flat.ram.stackPeak).toBeLessThan(4096);
    expect(flat.ram.stackPeak).toBeGreaterThan(0);
    expect(deep.ram.stackSize).toBe(65536);
  });

  it('reads host files through semihosting (rows as a file)', async () => {
    const rows = path.join(tmp, 'rows.bin');
    const bytes = Buffer.from(Array.from({ length: 1000 }, (_, i) => (i * 7) % 251));
    fs.writeFileSync(rows, bytes);
    const sum = bytes.reduce((a, b) => a + b, 0);
    const main = `#include <stdio.h>
int main(void) {
  FILE *f = fopen(${JSON.stringify(rows)}, "rb");
  if (!f) return 10;
  if (fseek(f, 0, SEEK_END) != 0) return 11;
  long n = ftell(f);
  rewind(f);
  unsigned char buf[256];
  unsigned long sum = 0;
  size_t got;
  while ((got = fread(buf, 1, sizeof buf, f)) > 0) for (size_t i = 0; i < got; i++) sum += buf[i];
  fclose(f);
  printf("%ld %lu\\n", n, sum);
  return 0;
}
`;
    const m = await measureFirmware({ core: 'm4f', sources: [path.join(F, 'lib.c')], rowsC: main });
    expect(m.exitCode).toBe(0);
    expect(m.stdout).toBe(`1000 ${sum}\n`);
  });

  it('names the source that does not compile, and the missing symbol that does not link', async () => {
    const broken = path.join(tmp, 'broken.c');
    fs.writeFileSync(broken, 'int measured_broken(void) { return missing_name; }\n');
    const e = await measureFirmware(base({ sources: [path.join(F, 'lib.c'), broken] })).catch((x: unknown) => x) as OfframpError;
    expect(e).toBeInstanceOf(OfframpError);
    expect(e.kind).toBe('data');
    expect(e.file).toBe(broken);
    expect(e.message).toMatch(/missing_name/);
    await expect(measureFirmware({ core: 'm4f', sources: [path.join(F, 'lib.c')], rowsC: 'void absent(void);\nint main(void) { absent(); return 0; }\n' }))
      .rejects.toThrow(/linking the firmware failed: .*undefined reference to `absent'/);
  });

  it('passes any exit status through and stops on a fault with its pc', async () => {
    const exit = await measureFirmware({ core: 'm7', sources: [path.join(F, 'lib.c')], rowsC: 'int main(void) { return 200; }\n' });
    expect(exit.exitCode).toBe(200);
    await expect(measureFirmware({ core: 'm55', sources: [path.join(F, 'lib.c')], rowsC: 'int main(void) { __asm__ volatile("udf #0"); return 0; }\n' }))
      .rejects.toThrow(/stopped on HardFault at pc 0x[0-9a-f]+/);
  });
});

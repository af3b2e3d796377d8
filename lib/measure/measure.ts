// Measuring firmware on an emulated Cortex-M: compile the library and a driver with the harness for
// one core, run the ELF under QEMU with semihosting and the counter plugin, and read back flash and
// RAM (ELF sections, the painted stack) and the executed instructions of each marked region.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { OfframpError } from '../errors.js';
import { coreOf, type Core, type MeasuredCore } from './cores.js';
import { readElf, sizes, symbol, type ElfSection } from './elf.js';
import { harnessDir, HARNESS_SOURCES } from './harness.js';
import { counterPlugin } from './plugin.js';
import { readCountLog, type Occurrence, type RegionSummary } from './regions.js';
import { runTool } from './spawn.js';
import { requireToolchain, type Toolchain } from './toolchain.js';

export interface MeasureOptions {
  /** m4f (mps2-an386), m7 (mps2-an500) or m55 (mps3-an547). m0plus is refused: QEMU 7.2 has no such machine. */
  core: MeasuredCore | string;
  /** The library's C files: their code and data are the `library` share of flash and RAM. Compiled
   *  with -DOFFRAMP_TRACE (unless `trace` is false), so the library's offramp_trace calls mark regions. */
  sources: string[];
  /** The driver: main() and what else runs the library (.c, .S); counted with the harness. */
  driverSources?: string[];
  /** More driver C, as text (e.g. a const table of input rows), compiled as rows.c. */
  rowsC?: string;
  includeDirs?: string[];
  /** Preprocessor definitions for all C files: NAME or NAME=VALUE. */
  defines?: string[];
  /** Extra flags for the library's and the driver's C (after -O2 -std=c99 -Wall -Wextra). */
  cflags?: string[];
  /** Define OFFRAMP_TRACE for the library (default true). */
  trace?: boolean;
  /** Bytes of painted stack (default 65536; a multiple of 8 from 1024). */
  stackBytes?: number;
  /** Limit on the emulator's run, ms (default 600000). */
  timeoutMs?: number;
  /** A new or empty folder to build and run in, kept afterwards (with fw.elf); default a temporary
   *  folder, removed. The firmware runs there: relative paths it opens through semihosting are in it. */
  workDir?: string;
  /** Add `timings` (wall-clock ms) to the result; off by default, since timings differ run to run. */
  timings?: boolean;
}

export interface Measurement {
  core: MeasuredCore;
  machine: string;
  clockHz: number;
  /** The status main returned or exit() was given (128 + signal after abort/raise). */
  exitCode: number;
  /** What the firmware wrote to its stdout and stderr (semihosting). */
  stdout: string;
  stderr: string;
  /** Bytes in flash: text + rodata + data's initial values; `library` is the sources' own share. */
  flash: { total: number; library: number };
  /** Bytes of RAM: total = data + bss + stackPeak; `library` = the sources' data + bss. The heap
   *  (used only by the C library's stdio buffers) is apart, as heapPeak. */
  ram: { total: number; library: number; data: number; bss: number; stackPeak: number; stackSize: number; heapPeak: number };
  /** The ELF's totals as Berkeley `size` counts them. */
  size: { text: number; data: number; bss: number };
  /** Instructions executed from reset to the exit call (harness included). */
  instructions: number;
  /** Instructions of one marker between two stores, subtracted from every region (see regions.ts). */
  calibration: number;
  /** Frames marked (frame begin events). */
  frames: number;
  /** Per stage and per decision index, and for all frames together (index -1): occurrences, total,
   *  min and max instructions. Mean per frame = the frame summary's total / count. */
  regions: RegionSummary[];
  /** Every region in the order it ended. */
  occurrences: Occurrence[];
  /** The ELF's path, when `workDir` was given. */
  elf?: string;
  /** Wall-clock ms of compiling and linking, and of the emulator's run; only with `timings: true`. */
  timings?: { buildMs: number; emulateMs: number };
}

const usage = (option: string, what: string) => new OfframpError('usage', `${option}: ${what}`);

function fileList(v: unknown, option: string, exts: RegExp, required: boolean): string[] {
  if (v === undefined && !required) return [];
  if (!Array.isArray(v) || (required && v.length === 0)) throw usage(option, required ? 'a non-empty array of file paths' : 'an array of file paths');
  return v.map((f, i) => {
    if (typeof f !== 'string' || !exts.test(f)) throw usage(`${option}[${i}]`, `${JSON.stringify(f)} is not a ${exts.source} file path`);
    let st: fs.Stats;
    try { st = fs.statSync(f); } catch { throw new OfframpError('io', `${option}[${i}]: no such file`, f); }
    if (!st.isFile()) throw new OfframpError('io', `${option}[${i}]: not a regular file`, f);
    return path.resolve(f);
  });
}

function stringList(v: unknown, option: string, check: (s: string) => boolean, what: string): string[] {
  if (v === undefined) return [];
  if (!Array.isArray(v)) throw usage(option, 'an array of strings');
  return v.map((s, i) => {
    if (typeof s !== 'string' || !check(s)) throw usage(`${option}[${i}]`, `${JSON.stringify(s)} is not ${what}`);
    return s;
  });
}

interface Checked {
  core: Core; sources: string[]; driver: string[]; rowsC?: string; includes: string[]; defines: string[]; cflags: string[];
  trace: boolean; stackBytes: number; timeoutMs: number; workDir?: string; timings: boolean;
}

function check(o: MeasureOptions): Checked {
  if (typeof o !== 'object' || o === null) throw usage('options', 'an object');
  const core = coreOf(o.core);
  const sources = fileList(o.sources, 'sources', /\.c$/, true);
  const driver = fileList(o.driverSources, 'driverSources', /\.(c|S|s)$/, false);
  if (o.rowsC !== undefined && typeof o.rowsC !== 'string') throw usage('rowsC', 'C source text');
  const includes = stringList(o.includeDirs, 'includeDirs', (d) => fs.existsSync(d) && fs.statSync(d).isDirectory(), 'an existing folder').map((d) => path.resolve(d));
  const defines = stringList(o.defines, 'defines', (d) => /^[A-Za-z_]\w*(=.*)?$/s.test(d), 'NAME or NAME=VALUE');
  const cflags = stringList(o.cflags, 'cflags', (f) => f.startsWith('-') && !/^-(o|c|S|E)$/.test(f), 'a compiler flag (other than -o, -c, -S, -E)');
  if (o.trace !== undefined && typeof o.trace !== 'boolean') throw usage('trace', 'true or false');
  const stackBytes = o.stackBytes ?? 65536;
  if (!Number.isInteger(stackBytes) || stackBytes < 1024 || stackBytes % 8 !== 0 || stackBytes > 1 << 21) throw usage('stackBytes', `${o.stackBytes} is not a multiple of 8 from 1024 to 2097152`);
  const timeoutMs = o.timeoutMs ?? 600_000;
  if (!Number.isInteger(timeoutMs) || timeoutMs <= 0) throw usage('timeoutMs', `${o.timeoutMs} is not a positive integer`);
  let workDir: string | undefined;
  if (o.workDir !== undefined) {
    if (typeof o.workDir !== 'string' || !o.workDir) throw usage('workDir', 'a folder path');
    workDir = path.resolve(o.workDir);
    if (fs.existsSync(workDir) && (!fs.statSync(workDir).isDirectory() || fs.readdirSync(workDir).length)) throw usage('workDir', `${o.workDir} is not a new or empty folder`);
  }
  if (o.timings !== undefined && typeof o.timings !== 'boolean') throw usage('timings', 'true or false');
  return { core, sources, driver, rowsC: o.rowsC, includes, defines, cflags, trace: o.trace ?? true, stackBytes, timeoutMs, workDir, timings: o.timings ?? false };
}

/** The first diagnostic of a compiler's or linker's output, as one line. */
function firstError(stderr: string): string {
  // collect2's "ld returned 1 exit status" says nothing; the linker's own line before it does.
  const lines = stderr.split('\n').map((l) => l.trim()).filter((l) => l && !l.startsWith('collect2:'));
  return (lines.find((l) => /\berror\b|undefined reference|overflowed|will not fit|multiple definition/.test(l)) ?? lines[0] ?? 'failed').slice(0, 400);
}

async function compile(tc: Toolchain, args: string[], src: string): Promise<string> {
  const r = await runTool(tc.armGcc, args, { timeoutMs: 300_000 });
  if (r.code !== 0) throw new OfframpError('data', `arm-none-eabi-gcc: ${firstError(r.stderr)}`, src);
  return r.stderr;
}

/** Run the tasks two at a time; each task's error (or undefined) in the tasks' order. */
async function inPairs(tasks: (() => Promise<unknown>)[]): Promise<(unknown | undefined)[]> {
  const errors: (unknown | undefined)[] = new Array(tasks.length).fill(undefined);
  let next = 0;
  const worker = async () => {
    while (next < tasks.length) {
      const k = next++;
      try { await tasks[k]!(); } catch (e) { errors[k] = e; }
    }
  };
  await Promise.all([worker(), worker()]);
  return errors;
}

const sectionSize = (sections: ElfSection[], names: string[]) => sections.filter((s) => names.includes(s.name)).reduce((a, s) => a + s.size, 0);

function readReport(file: string): Record<string, number> | undefined {
  if (!fs.existsSync(file)) return undefined;
  const out: Record<string, number> = {};
  for (const line of fs.readFileSync(file, 'utf8').split('\n')) {
    const m = /^(\w+) (\d+)$/.exec(line);
    if (m) out[m[1]!] = Number(m[2]);
  }
  return out;
}

const EXCEPTIONS: Record<number, string> = { 2: 'NMI', 3: 'HardFault', 4: 'MemManage', 5: 'BusFault', 6: 'UsageFault', 7: 'SecureFault', 11: 'SVCall', 12: 'DebugMonitor', 14: 'PendSV', 15: 'SysTick' };

/**
 * Build `sources` (the library) and the driver with the harness for `core`, run it under
 * qemu-system-arm with semihosting and the counter plugin, and measure it.
 *
 * The driver supplies `int main(void)`; its return value (or exit()'s status) is `exitCode`. The
 * library marks regions by calling `offramp_trace(event, index)` (harness/trace.c): 1/2 stage begin
 * and end, 3/4 decision begin and end (index = exit), 5/6 frame begin and end. Instructions per
 * region are exact and repeatable: the same inputs give the same figures, bit for bit.
 *
 * Throws OfframpError: 'usage' for a bad option, a core QEMU cannot run, or a missing toolchain (its
 * line names the Debian packages); 'data' when a source does not compile; 'runtime' when the link
 * fails, the firmware faults, the run exceeds `timeoutMs`, or its markers do not pair up.
 */
export async function measureFirmware(options: MeasureOptions): Promise<Measurement> {
  const o = check(options);
  const tc = requireToolchain();
  const plugin = await counterPlugin(tc.hostGcc);
  const harness = harnessDir();
  const work = o.workDir ?? fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-measure-'));
  fs.mkdirSync(path.join(work, 'lib'), { recursive: true });
  const t0 = performance.now();
  try {
    const arch = ['-mthumb', ...o.core.flags];
    const cbase = [...arch, '-O2', '-std=c99', '-ffunction-sections', '-fdata-sections', '-Wall', '-Wextra'];
    const user = [...o.defines.map((d) => `-D${d}`), ...o.includes.map((d) => `-I${d}`), ...o.cflags];
    const driver = [...o.driver];
    if (o.rowsC !== undefined) {
      const rows = path.join(work, 'rows.c');
      fs.writeFileSync(rows, o.rowsC);
      driver.push(rows);
    }
    // Every compile, in a fixed order of objects; two at a time (the error reported is the first
    // source's in that order, whichever finished first).
    const jobs: { src: string; obj: string; args: string[] }[] = [
      ...o.sources.map((src, i) => {
        const obj = path.join(work, 'lib', `${i}-${path.basename(src, '.c')}.o`);
        return { src, obj, args: [...cbase, ...(o.trace ? ['-DOFFRAMP_TRACE'] : []), ...user, '-c', src, '-o', obj] };
      }),
      ...HARNESS_SOURCES.map((name) => {
        const src = path.join(harness, name);
        const obj = path.join(work, `harness-${name.replace(/\.\w+$/, '')}.o`);
        return { src, obj, args: [...cbase, '-Werror', '-c', src, '-o', obj] };
      }),
      ...driver.map((src, i) => {
        const obj = path.join(work, `driver-${i}-${path.basename(src).replace(/\.\w+$/, '')}.o`);
        return { src, obj, args: src.endsWith('.c') ? [...cbase, ...user, '-c', src, '-o', obj] : [...arch, ...user, '-c', src, '-o', obj] };
      }),
    ];
    const failures = await inPairs(jobs.map((j) => () => compile(tc, j.args, j.src)));
    const failed = failures.find((f) => f !== undefined);
    if (failed) throw failed;
    const libObjs = jobs.slice(0, o.sources.length).map((j) => j.obj);
    const objs = jobs.slice(o.sources.length).map((j) => j.obj);
    const archive = path.join(work, 'libofframp-measured.a');
    const ar = await runTool(tc.armAr, ['rcsD', archive, ...libObjs], { timeoutMs: 60_000 });
    if (ar.code !== 0) throw new OfframpError('runtime', `arm-none-eabi-ar: ${firstError(ar.stderr)}`, archive);
    const elfPath = path.join(work, 'fw.elf');
    const link = await runTool(tc.armGcc, [
      ...arch, '--specs=nano.specs', '-nostartfiles', `-L${harness}`, '-T', o.core.memory, '-Wl,--gc-sections',
      `-Wl,--defsym=offramp_harness_stack_size=${o.stackBytes}`, '-o', elfPath, ...objs, archive,
    ], { timeoutMs: 300_000 });
    if (link.code !== 0) throw new OfframpError('runtime', `linking the firmware failed: ${firstError(link.stderr)}`, elfPath);

    const elf = readElf(fs.readFileSync(elfPath), elfPath);
    const trace = symbol(elf, 'offramp_trace', elfPath);
    const marks = symbol(elf, 'offramp_harness_marks', elfPath);
    const marksSize = symbol(elf, 'OFFRAMP_HARNESS_MARKS_SIZE', elfPath);
    const traceLo = trace.value & ~1;
    const hex = (n: number) => `0x${n.toString(16)}`;
    const logPath = path.join(work, 'counts.txt');
    const reportPath = path.join(work, 'offramp-harness.txt');
    const pluginArg = [plugin.replaceAll(',', ',,'), `out=${logPath.replaceAll(',', ',,')}`, `trace=${hex(traceLo)}:${hex(traceLo + trace.size)}`,
      `marks=${hex(marks.value)}:${hex(marks.value + marksSize.value)}`].join(',');
    const tRun = performance.now();
    const run = await runTool(tc.qemu, [
      '-M', o.core.machine, '-nographic', '-monitor', 'none', '-serial', 'none',
      '-semihosting-config', 'enable=on,target=native', '-kernel', elfPath, '-plugin', pluginArg,
    ], { cwd: work, timeoutMs: o.timeoutMs });
    if (run.timedOut) throw new OfframpError('runtime', `the firmware ran longer than ${o.timeoutMs} ms under ${o.core.machine}`, elfPath);
    const report = readReport(reportPath);
    if (!report || report.status === undefined) {
      throw new OfframpError('runtime', `QEMU (${o.core.machine}) stopped without the harness's report: ${firstError(run.stderr || `exit status ${run.code ?? run.signal}`)}`, elfPath);
    }
    if (report.fault !== undefined) {
      const name = EXCEPTIONS[report.fault] ?? `exception ${report.fault}`;
      throw new OfframpError('runtime', `the firmware stopped on ${name} at pc ${hex(report.pc ?? 0)}`, elfPath);
    }
    const exitCode = report.status! | 0;
    if (!fs.existsSync(logPath)) throw new OfframpError('runtime', 'the counter plugin wrote no log', logPath);
    const counts = readCountLog(fs.readFileSync(logPath, 'utf8'), exitCode === 0, logPath);

    const berkeley = sizes(elf.sections);
    const data = sectionSize(elf.sections, ['.lib.data', '.data']);
    const bss = sectionSize(elf.sections, ['.lib.bss', '.bss']);
    const stackPeak = report.stack!;
    if (stackPeak >= o.stackBytes) throw new OfframpError('runtime', `the stack overflowed its ${o.stackBytes} bytes (raise stackBytes)`, elfPath);
    return {
      core: o.core.name, machine: o.core.machine, clockHz: o.core.clockHz,
      exitCode, stdout: run.stdout, stderr: run.stderr,
      flash: { total: berkeley.text + berkeley.data, library: sectionSize(elf.sections, ['.lib.text', '.lib.rodata', '.lib.data']) },
      ram: { total: data + bss + stackPeak, library: sectionSize(elf.sections, ['.lib.data', '.lib.bss']), data, bss, stackPeak, stackSize: report.stack_size!, heapPeak: report.heap! },
      size: berkeley,
      instructions: counts.total, calibration: counts.calibration, frames: counts.frames, regions: counts.regions, occurrences: counts.occurrences,
      ...(o.workDir ? { elf: elfPath } : {}),
      ...(o.timings ? { timings: { buildMs: tRun - t0, emulateMs: run.ms } } : {}),
    };
  } finally {
    if (!o.workDir) fs.rmSync(work, { recursive: true, force: true });
  }
}

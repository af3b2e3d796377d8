// The built-in profiles' measured MAC rates (lib/chip/measured-rates.json, scripts/measure-rates.ts) and
// the budget from a measurement (cost DIR --measured). The rates follow from the committed counts by
// the definitions the file states (MAC/cycle = 1 / (instructions per MAC × cycles per instruction),
// common practice for a throughput figure); the counts themselves are re-measured on the emulated m4f
// (QEMU 7.2's mps2-an386 with the exact counter, checked in measure.test.ts against loops of known
// length) and must equal the file's. Measured latencies are instructions × the stated cycles per
// instruction at the clock, worked out here with integer arithmetic. Needs Debian's gcc-arm-none-eabi,
// libnewlib-arm-none-eabi and qemu-system-arm for the emulated part: skipped without them, a failure under CI.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { BUILTIN_TARGETS, FROM_MEMORY_RATES, parseRatio, resolveTarget } from '../lib/chip/target.js';
import { macsPerCycleText, readMeasuredRates, type RatedCore } from '../lib/chip/rates.js';
import { checkBudget, type StageFootprint } from '../lib/chip/budget.js';
import { CYCLES_PER_INSTRUCTION } from '../lib/measure/device.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import { CORES, RATES_FILE, demoNetwork, measureNetwork, ratesFrom } from '../scripts/measure-rates.js';
import { convBench } from '../bench/measure.js';
import { offramp } from './helpers/cli.js';

const EMU = toolchainStatus().ready;
if (!EMU && process.env.CI) throw new Error(`the measured-rate tests need the Arm toolchain under CI: ${toolchainStatus().message}`);
const rates = readMeasuredRates(RATES_FILE);

describe('the measured rates file', () => {
  it('derives every rate from its own counts: 1 / (instructions per MAC × cycles per instruction), 4 digits rounded down', () => {
    for (const core of CORES) {
      const c = rates.cores[core];
      // the estimate stated beside every measurement is the one the rates used
      expect(c.cyclesPerInstruction).toBe(CYCLES_PER_INSTRUCTION[core]);
      const rows = rates.int8.filter((r) => r.core === core);
      expect(rows.map((r) => r.network).sort()).toEqual(['fan-monitor', 'fmnist-cnn']);
      for (const r of rows) expect(r.instructionsPerMac).toBeCloseTo(r.instructions / r.macs, 4);
      // the profile takes the slower network
      expect(c.int8.instructionsPerMac).toBe(Math.max(...rows.map((r) => r.instructionsPerMac)));
      const f = rates.float32.find((r) => r.core === core)!;
      expect(c.float32.instructionsPerMac).toBeCloseTo(f.instructions / f.macs, 4);
      for (const k of ['int8', 'float32'] as const) {
        const exact = 1 / (c[k].instructionsPerMac * c.cyclesPerInstruction);
        const r = Number(c[k].macsPerCycle);
        expect(r).toBeLessThanOrEqual(exact);
        expect(r).toBeGreaterThan(exact * (1 - 1e-3));
        expect(c[k].macsPerCycle).toBe(macsPerCycleText(c[k].instructionsPerMac, c.cyclesPerInstruction));
      }
    }
    // the file is what the script writes from these rows
    expect(ratesFrom(rates.int8, rates.float32)).toEqual(rates);
  });

  it('is what the built-in m4f, m7 and m55 profiles carry; m0plus keeps its from-memory figures, marked', () => {
    for (const core of CORES) {
      const t = BUILTIN_TARGETS[core]!;
      expect(t.int8MacsPerCycle).toEqual(parseRatio(rates.cores[core].int8.macsPerCycle));
      expect(t.macsPerCycle).toEqual(parseRatio(rates.cores[core].float32.macsPerCycle));
      expect(t.rateBasis).toEqual({ float: 'measured', int8: 'measured' });
      expect(t.rough).toBe(true);
      expect(t.note).toMatch(/measured on the emulated core .* estimated .* cycles per instruction; flash, RAM and clock a typical part's, from memory/);
      expect(t.note).toContain('the firmware has no float kernels');
    }
    const m0 = BUILTIN_TARGETS.m0plus!;
    expect(m0.rateBasis).toEqual({ float: 'from memory', int8: 'from memory' });
    expect([m0.macsPerCycle, m0.int8MacsPerCycle]).toEqual([parseRatio(FROM_MEMORY_RATES.m0plus!.float), parseRatio(FROM_MEMORY_RATES.m0plus!.int8)]);
    expect(m0.note).toMatch(/no Cortex-M0\+ machine.*from memory/);
  });

  it('names the basis of every budget latency: projected from the measured rate, or from memory', () => {
    const fp = { weightBytes: 10n, peakBytes: 10n, arenaBytes: 10n, handoverInBytes: 0n, handoverOutBytes: 0n };
    const stages: StageFootprint[] = [{ index: 0, cut: '', macs: 1000n, stored: fp, int8: fp }];
    const basis = (o: Parameters<typeof resolveTarget>[0]) => {
      const b = checkBudget(stages, resolveTarget(o)!);
      return [b.stages[0]!.stored.latencyBasis, b.stages[0]!.int8.latencyBasis];
    };
    expect(basis({ target: 'm4f' })).toEqual(['projected from the measured rate', 'projected from the measured rate']);
    expect(basis({ target: 'm0plus' })).toEqual(['from memory', 'from memory']);
    // a rate given replaces the measured one, for its precision only
    expect(basis({ target: 'm7', macsPerCycle: '0.5' })).toEqual(['from memory', 'projected from the measured rate']);
    expect(basis({ target: 'm55', int8MacsPerCycle: '4' })).toEqual(['projected from the measured rate', 'from memory']);
    expect(basis({ flash: '1M', ram: '64K', clockMhz: '48', macsPerCycle: '1' })).toEqual(['from memory', 'from memory']);
    // the projection itself: 1000 MACs at the measured int8 rate, at 80 MHz (cycles · 1000 / MHz ns, both rounded up)
    const r = parseRatio(rates.cores.m4f.int8.macsPerCycle);
    const cycles = (1000n * r.den + r.num - 1n) / r.num;
    expect(checkBudget(stages, BUILTIN_TARGETS.m4f!).stages[0]!.int8.latencyNs).toBe((cycles * 1000n + 79n) / 80n);
  });
});

describe('cost\'s budget text names each latency\'s basis', () => {
  const model = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
  it('projected on m4f, from memory on m0plus and for a rate given, in the table, the words under it and the JSON', () => {
    const m4 = offramp(['cost', model, '--no-nodes', '--target', 'm4f']);
    expect(m4.code).toBe(0);
    expect(m4.stdout).toMatch(/m4f: .* — MAC rates measured on the emulated core, cycles per instruction estimated; flash, RAM and clock ROUGH FIGURES, FROM MEMORY/);
    expect(m4.stdout).toMatch(/latency is\s+verdict/);
    expect(m4.stdout).toMatch(/\bprojected\s+fits/);
    expect(m4.stdout).toMatch(/\nlatency    projected: MACs \/ the MAC rate measured on the emulated core/);
    const m0 = offramp(['cost', model, '--no-nodes', '--target', 'm0plus']);
    expect(m0.stdout).toMatch(/\bfrom memory\s+(fits|OVER)/);
    expect(m0.stdout).not.toMatch(/\bprojected\s+(fits|OVER)/);
    const given = JSON.parse(offramp(['cost', model, '--json', '--target', 'm4f', '--macs-per-cycle', '0.5']).stdout).budget;
    expect(given.target.rateBasis).toEqual({ float: 'from memory', int8: 'measured' });
    expect([given.stages[0].stored.latencyBasis, given.stages[0].int8.latencyBasis]).toEqual(['from memory', 'projected from the measured rate']);
  });
});

describe.skipIf(!EMU)('measured again on the emulated m4f', () => {
  const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-rates-test-'));
  const f = (n: string) => path.join(tmp, n);
  let dir = '';
  afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
  beforeAll(() => { dir = demoNetwork(tmp).dir; });

  it('the demo network and the float32 convolution count what the committed file says', async () => {
    const core: RatedCore = 'm4f';
    const got = await measureNetwork({ name: 'fan-monitor', model: 'models-demo/fan-monitor.onnx', dir, data: f('fan-monitor-rows.npy') }, core);
    expect(got).toEqual(rates.int8.find((r) => r.core === core && r.network === 'fan-monitor'));
    const c = await convBench(core);
    const want = rates.float32.find((r) => r.core === core)!;
    expect([c.macs, c.floatInstructions]).toEqual([want.macs, want.instructions]);
  });

  describe('cost DIR --measured', () => {
    let m: { stages: { file: string; instructions: number }[]; decisions: { exit: number; meanInstructions: number }[]; flash: { libraryBytes: number }; ram: { libraryBytes: number; stackPeakBytes: number } };
    beforeAll(() => {
      // a policy to measure with, then the measurement as a user makes it
      const t = offramp(['tune', dir, '--data', f('fan-monitor-fit.npy'), '--labels', f('fan-monitor-fit-y.npy')]);
      if (t.code !== 0) throw new Error(t.stderr);
      const r = offramp(['measure', dir, '--data', f('fan-monitor-fit.npy'), '--rows', '6', '--core', 'm4f', '--json', '-o', f('m.json')]);
      if (r.code !== 0) throw new Error(r.stderr);
      m = JSON.parse(fs.readFileSync(f('m.json'), 'utf8'));
    });

    it('counts each kernel step: the steps of a stage add up to it, less their markers\' few instructions, and their MACs to its MACs', () => {
      const j = m as unknown as { stages: { index: number; macs: number; instructions: number }[]; steps: { stage: number; macs: number; instructions: number; kernel: string }[] };
      for (const s of j.stages) {
        const mine = j.steps.filter((x) => x.stage === s.index);
        const sum = mine.reduce((a, x) => a + x.instructions, 0);
        expect(sum).toBeLessThanOrEqual(s.instructions);
        // the walk between steps (the step table, its switch) and a marker's call sequence: a few dozen instructions a step
        expect(s.instructions - sum).toBeLessThan(60 * mine.length);
        expect(mine.reduce((a, x) => a + x.macs, 0)).toBe(s.macs);
        expect(mine.some((x) => x.kernel === 'conv')).toBe(true);
      }
    });

    it('prints the measured latency per stage and to each exit: instructions × 1.3 cycles at 80 MHz; flash and RAM as measured', () => {
      const r = offramp(['cost', dir, '--measured', f('m.json'), '--json']);
      expect(r.stderr).toBe('');
      expect(r.code).toBe(0);
      const j = JSON.parse(r.stdout);
      expect(j.schema).toBe('offramp-cost-measured/1');
      const mb = j.measured;
      expect(mb).toMatchObject({ core: 'm4f', cyclesPerInstruction: CYCLES_PER_INSTRUCTION.m4f, clockMhz: 80, target: 'm4f' });
      // exit k is stage k's (one exit a stage in this folder); its decision belongs to the path to it
      const decision = (k: number) => m.decisions.find((d) => d.exit === k)?.meanInstructions ?? 0;
      // cycles = ceil(instructions × 13 / 10), ns = ceil(cycles × 1000 / 80)
      const cycles = (i: number) => Math.ceil((i * 13) / 10), ns = (c: number) => Math.ceil((c * 1000) / 80);
      let cum = 0;
      m.stages.forEach((s, k) => {
        const own = s.instructions + (k < m.stages.length - 1 ? decision(k) : 0);
        cum += own;
        expect(mb.stages[k]).toMatchObject({ file: s.file, instructions: s.instructions, cycles: cycles(own), latencyNs: ns(cycles(own)), cumulativeNs: ns(cycles(cum)), latencyBasis: 'measured' });
      });
      expect(mb.flash).toMatchObject({ need: m.flash.libraryBytes, limit: 1024 * 1024 });
      expect(mb.ram).toMatchObject({ need: m.ram.libraryBytes + m.ram.stackPeakBytes, libraryBytes: m.ram.libraryBytes, stackPeakBytes: m.ram.stackPeakBytes });
      expect(mb.flash.plannedBytes).toBe(j.budget.all.stored.flash.need);
      // the planned budget beside it says its latencies are projections
      expect(j.budget.stages.every((s: { stored: { latencyBasis: string } }) => s.stored.latencyBasis === 'projected from the measured rate')).toBe(true);

      const text = offramp(['cost', dir, '--measured', f('m.json')]).stdout;
      expect(text).toMatch(/^measured on m4f \(QEMU mps2-an386/);
      expect(text).toContain('latency is measured: instructions counted exactly on the emulated core, cycles at an estimated 1.3 cycles per instruction');
      expect(text).toMatch(/latency\s+projected: MACs \/ the MAC rate measured/);
    });

    it('judges flash and RAM as measured (exit 3 a byte short), at the clock given over the measured core\'s profile', () => {
      const need = m.ram.libraryBytes + m.ram.stackPeakBytes;
      const over = offramp(['cost', dir, '--measured', f('m.json'), '--ram', String(need - 1)]);
      expect(over.code).toBe(3);
      expect(over.stderr).toBe(`offramp: over budget as measured on m4f: RAM needs ${need} B of ${need - 1} B\n`);
      const r = offramp(['cost', dir, '--measured', f('m.json'), '--ram', String(need), '--clock-mhz', '120', '--json']);
      expect(r.code).toBe(0);
      const last = JSON.parse(r.stdout).measured.stages.at(-1);
      expect(last.cumulativeNs).toBe(Math.ceil((Math.ceil((last.cumulativeInstructions * 13) / 10) * 1000) / 120));
    });

    it('refuses a measurement of other stage files in one line (exit 1), and another core\'s profile (exit 2)', () => {
      // the same split quantized on other calibration rows: other int8 files
      const q = offramp(['quantize', f('fan-monitor-split'), '--data', f('fan-monitor-fit.npy'), '-o', f('other')]);
      expect(q.code).toBe(0);
      const before = fs.readFileSync(f('m.json'));
      const r = offramp(['cost', f('other'), '--measured', f('m.json')]);
      expect(r.code).toBe(1);
      expect(r.stdout).toBe('');
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toContain(f('m.json'));
      expect(r.stderr).toMatch(/measured on other stage files than the folder given \(stage 0: 'stage-0\.[0-9a-f]{16}\.onnx' measured/);
      expect(fs.readFileSync(f('m.json'))).toEqual(before);
      // a manifest rewritten since (another policy) over the same stage files: accepted, and said
      fs.writeFileSync(f('m2.json'), JSON.stringify({ ...JSON.parse(before.toString('utf8')), manifestSha256: '0'.repeat(64) }));
      const same = offramp(['cost', dir, '--measured', f('m2.json')]);
      expect(same.code).toBe(0);
      expect(same.stdout).toContain('the manifest changed since the measurement (same stage files)');
      const w = offramp(['cost', dir, '--measured', f('m.json'), '--target', 'm7']);
      expect(w.code).toBe(2);
      expect(w.stderr).toMatch(/--target m7: .* was measured on m4f/);
      const c = offramp(['cost', dir, '--measured', f('m.json'), '--cuts', 'x']);
      expect(c.code).toBe(2);
      // a float folder or a model file: the firmware measured is int8, of a quantized folder
      expect(offramp(['cost', f('fan-monitor-split'), '--measured', f('m.json')]).stderr).toMatch(/fan-monitor-split is a float folder/);
      const model = offramp(['cost', f('fan-monitor-grafted.onnx'), '--measured', f('m.json')]);
      expect([model.code, model.stderr.trim().split('\n').length]).toEqual([2, 1]);
      expect(model.stderr).toMatch(/is a model file/);
      // the measurement is an input: never an output
      expect(offramp(['cost', dir, '--measured', f('m.json'), '-o', f('m.json')]).code).toBe(2);
      expect(fs.readFileSync(f('m.json'))).toEqual(before);
    });
  });
});

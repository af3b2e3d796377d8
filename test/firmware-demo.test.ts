// The whole int8 network as C (emit-c on a build's DIR/int8), on the invented demo scenario:
// compiled with gcc, every int8 tensor of every frame equals the TypeScript integer reference
// (lib/firmware/interp.ts) bit for bit, and so do the answers under the tuned policy; against
// onnxruntime running the same QDQ stage files (an outside implementation of the ONNX
// QuantizeLinear/DequantizeLinear definitions), each int8 value is within a step or so and the
// label and exit agree on at least 99.5 % of validation windows.
import { describe, it, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { offramp } from './helpers/cli.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { toolchainStatus } from '../lib/measure/toolchain.js';
import { measureDevice } from '../lib/measure/device.js';
import { GCC, compileFirmware, firmwareAnswers, loadProgram, againstOrt, histogram, expectReferenceEqual } from './helpers/firmware.js';

if (!GCC && process.env.CI) throw new Error('gcc is missing: the firmware tests need it under CI');
const EMU = toolchainStatus().ready;
if (!EMU && process.env.CI) throw new Error(`the emulated Cortex-M tests need the toolchain under CI: ${toolchainStatus().message}`);
const MODEL = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-fw-demo-'));
const f = (n: string) => path.join(tmp, n);
afterAll(() => fs.rmSync(tmp, { recursive: true, force: true }));
let val: Float32Array;

beforeAll(() => {
  const c = samples(3000, 202), v = samples(2000, 303);
  writeNpy(f('x.npy'), c.x, [3000, 1, BINS, FRAMES]); writeNpy(f('y.npy'), c.y, [3000]);
  val = v.x;
  // with the emulator, the build measures its int8 firmware too (build --measure)
  const r = offramp(['build', MODEL, '--data', f('x.npy'), '--labels', f('y.npy'), '--head', 'grid:4', '--target', 'm4f', '--int8', ...(EMU ? ['--measure', '--measure-rows', '40'] : []), '-o', f('b')]);
  if (r.code !== 0) throw new Error(r.stderr);
  const e = offramp(['emit-c', f('b/int8'), '-o', f('fw')]);
  if (e.code !== 0) throw new Error(e.stderr);
}, 600_000);

describe.skipIf(!GCC)('int8 firmware of the demo model', { timeout: 600_000 }, () => {
  it('is a self-contained C99 library: no double, no libm, no malloc', () => {
    const names = fs.readdirSync(f('fw'));
    expect(names).toContain('offramp_model.h');
    // every C file, the decision library (offramp_decide, offramp_policy, offramp_config) included
    for (const n of names.filter((x) => /^offramp_\w+\.[ch]$/.test(x))) {
      const text = fs.readFileSync(f(`fw/${n}`), 'utf8').replace(/\/\*[\s\S]*?\*\//g, '');
      expect(text, n).not.toMatch(/\bdouble\b|<math\.h>|\bmalloc\b|\bfree\b/);
    }
  });

  it('equals the integer reference bit for bit on every int8 tensor and every answer', () => {
    compileFirmware(f('fw'), f('fw.exe'));
    const per = BINS * FRAMES;
    const { values, answers: fa, program } = expectReferenceEqual(f('fw.exe'), f('b/int8'), val.subarray(0, 200 * per), val);
    const exits = Array.from({ length: program.logits.length }, (_, k) => fa.exit.filter((e) => e === k).length);
    console.log(`demo int8 firmware (gcc): ${values} int8 values of 200 windows bit for bit equal to the reference; ${fa.label.length} answers equal; exits taken ${exits.join(' / ')}`);
  });

  it('agrees with onnxruntime on the QDQ stage files: int8 values within 1 step, label and exit on ≥ 99.5 % of windows', async () => {
    const { program, manifest, reach, outputs } = loadProgram(f('b/int8'));
    const fa = firmwareAnswers(f('fw.exe'), val);
    const o = await againstOrt(f('b/int8'), program, outputs, manifest.policy!.rule, reach, val, fa);
    const total = [...o.steps.values()].reduce((a, b) => a + b, 0);
    const agree = 1 - o.differ.length / o.frames;
    console.log(`demo int8 firmware vs onnxruntime on ${o.frames} validation windows: int8 logits of every exit ${histogram(o.steps)} (of ${total}); label and exit equal on ${(agree * 100).toFixed(2)} %`
      + (o.differ.length ? `; differ at ${o.differ.slice(0, 5).map((d) => `#${d.frame} (label, exit) ${d.firmware} vs ${d.ort}`).join(', ')}: the fixed-point requantization rounds where onnxruntime rounds a float product, a step apart near a threshold` : ''));
    expect(Math.max(...o.steps.keys())).toBeLessThanOrEqual(1);
    expect(agree).toBeGreaterThanOrEqual(0.995);
  });
});

describe.skipIf(!EMU)('int8 firmware of the demo model on emulated Cortex-M cores', { timeout: 600_000 }, () => {
  it('build --measure leads its report with the device figures: the policy against the whole network, measured on the emulated m4f', async () => {
    const j = JSON.parse(fs.readFileSync(f('b/report.json'), 'utf8'));
    const d = j.device;
    expect(d.schema).toBe('offramp-measure/1');
    expect(d.core).toBe('m4f');
    expect(d.frames).toBe(40);
    expect(d.answers.equalToReference).toBe(40);
    expect(d.basis.clockMhz).toBe(80);   // the target's clock
    expect(d.perFrame.policyMicroseconds).toBeCloseTo((d.perFrame.policy * d.basis.cyclesPerInstruction) / 80, 0);
    // the same firmware measured by the command on the same rows: the same exact counts
    const again = await measureDevice({ dir: f('b/int8'), data: f('x.npy'), labels: f('y.npy'), core: 'm4f', rows: 40, clockMhz: 80 });
    expect(again.perFrame).toEqual(d.perFrame);
    expect(again.stages).toEqual(d.stages);
    expect(fs.readFileSync(f('b/report.html'), 'utf8')).toContain('On the device (emulated m4f)');
  });

  for (const core of ['m4f', 'm7', 'm55']) {
    it(`${core}: every answer equal to the TypeScript reference (the DSP kernels where the core has them); exact, repeatable counts`, async () => {
      const r = await measureDevice({ dir: f('b/int8'), data: f('x.npy'), labels: f('y.npy'), core, rows: 60 });
      expect(r.answers.equalToReference).toBe(r.frames);
      expect(r.frames).toBe(60);
      // whole-network frames run every stage: their instructions equal the stages' sum plus the input and the final argmax
      const stageSum = r.stages.reduce((a, s) => a + s.instructions, 0);
      expect(r.perFrame.full).toBeGreaterThan(stageSum);
      expect(r.perFrame.full).toBeLessThan(stageSum * 1.05);
      expect(r.perFrame.policy).toBeLessThan(r.perFrame.full);
      console.log(`demo int8 firmware on ${core}: ${r.perFrame.policy} instructions per frame with the policy, ${r.perFrame.full} whole network (${(r.perFrame.savedShare * 100).toFixed(1)} % saved); per MAC by stage ${r.stages.map((s) => s.instructionsPerMac.toFixed(2)).join(' / ')}; flash ${r.flash.libraryBytes} B, RAM ${r.ram.libraryBytes} B + stack ${r.ram.stackPeakBytes} B; ${r.answers.equalToOnnxruntime}/${r.frames} equal to onnxruntime`);
      if (core === 'm4f') {
        const again = await measureDevice({ dir: f('b/int8'), data: f('x.npy'), labels: f('y.npy'), core, rows: 60 });
        expect(JSON.stringify(again)).toBe(JSON.stringify(r));
      }
    });
  }
});

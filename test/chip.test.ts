import { describe, it, expect, beforeAll } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { parseBytes, parseRatio, ratioText, readTargetFile, resolveTarget, BUILTIN_TARGETS, type Target } from '../lib/chip/target.js';
import { budgetOf, checkBudget, cyclesFor, nanosFor, stageFootprints, fit } from '../lib/chip/budget.js';
import { costModel } from '../lib/cost/report.js';
import { OfframpError } from '../lib/errors.js';
import { model, vi, node, ints, int, floatTensor } from './helpers/proto.js';

describe('byte sizes', () => {
  it.each([
    ['1000', 1000n], ['256K', 262144n], ['256k', 262144n], ['256KB', 262144n], ['256KiB', 262144n], ['256 KiB', 262144n],
    ['1M', 1048576n], ['2MiB', 2097152n], ['1.5M', 1572864n], ['0.5K', 512n], ['0x40000', 262144n], ['1G', 1073741824n],
  ])('%s = %s bytes (K = 1024)', (s, v) => expect(parseBytes(s)).toBe(v));
  it.each(['', 'K', '12X', '-5', '0', '0K', '1e3', '1.5', '0.1K', '12 bytes', '0x'])('refuses %j with a usage error', (s) => {
    expect(() => parseBytes(s, '--ram')).toThrow(OfframpError);
    try { parseBytes(s, '--ram'); } catch (e) { expect((e as OfframpError).kind).toBe('usage'); expect((e as Error).message).toMatch(/--ram/); }
  });
  it('keeps rates exact and prints them back', () => {
    expect(parseRatio('0.25')).toEqual({ num: 1n, den: 4n });
    expect(parseRatio('16.384')).toEqual({ num: 2048n, den: 125n });
    expect(ratioText(parseRatio('16.384'))).toBe('16.384');
    expect(ratioText(parseRatio('80'))).toBe('80');
    expect(() => parseRatio('1e3')).toThrow();
  });
});

describe('target profiles', () => {
  let dir: string;
  const file = (name: string, body: string) => { const f = path.join(dir, name); fs.writeFileSync(f, body); return f; };
  beforeAll(() => { dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-target-')); });

  it('reads a profile with numbers and size strings', () => {
    const f = file('ok.json', JSON.stringify({ name: 'bench board', flashBytes: '512KiB', ramBytes: 131072, clockMhz: 64, macsPerCycle: 0.5, $comment: 'ours' }));
    expect(readTargetFile(f)).toEqual({
      name: 'bench board', flashBytes: 524288n, ramBytes: 131072n, clockMhz: { num: 64n, den: 1n },
      macsPerCycle: { num: 1n, den: 2n }, int8MacsPerCycle: { num: 1n, den: 2n },
    });
  });
  it.each([
    ['missing.json', null, /no such file/],
    ['notjson.json', '{ flashBytes: 1 ', /not valid JSON/],
    ['array.json', '[1,2]', /a target profile is a JSON object/],
    ['nofield.json', JSON.stringify({ flashBytes: 1024, ramBytes: 1024, clockMhz: 48 }), /field 'macsPerCycle' is missing/],
    ['typo.json', JSON.stringify({ flash: 1024, ramBytes: 1024, clockMhz: 48, macsPerCycle: 1 }), /unknown field 'flash'/],
    ['badsize.json', JSON.stringify({ flashBytes: 'lots', ramBytes: 1024, clockMhz: 48, macsPerCycle: 1 }), /flashBytes: .*not a byte size/],
    ['fraction.json', JSON.stringify({ flashBytes: 1024.5, ramBytes: 1024, clockMhz: 48, macsPerCycle: 1 }), /whole number of bytes/],
    ['negclock.json', JSON.stringify({ flashBytes: 1024, ramBytes: 1024, clockMhz: -48, macsPerCycle: 1 }), /clockMhz/],
    ['zerorate.json', JSON.stringify({ flashBytes: 1024, ramBytes: 1024, clockMhz: 48, macsPerCycle: 0 }), /macsPerCycle.*more than 0/],
    ['badname.json', JSON.stringify({ name: 7, flashBytes: 1024, ramBytes: 1024, clockMhz: 48, macsPerCycle: 1 }), /'name' must be a string/],
  ])('%s: one line naming the file', (name, body, msg) => {
    const f = body === null ? path.join(dir, name) : file(name, body);
    let err: OfframpError | undefined;
    try { readTargetFile(f); } catch (e) { err = e as OfframpError; }
    expect(err).toBeInstanceOf(OfframpError);
    expect(err!.line()).toContain(f);
    expect(err!.line()).toMatch(msg);
    expect(err!.line().split('\n')).toHaveLength(1);
  });
  it('built-in profiles are marked rough; options override their figures', () => {
    for (const t of Object.values(BUILTIN_TARGETS)) expect(t.rough).toBe(true);
    const t = resolveTarget({ target: 'm4f', ram: '64K' })!;
    expect(t).toMatchObject({ name: 'm4f', rough: true, ramBytes: 65536n, flashBytes: BUILTIN_TARGETS.m4f.flashBytes });
  });
  it('options alone need all four figures; no figure means no target', () => {
    expect(resolveTarget({})).toBeUndefined();
    expect(() => resolveTarget({ flash: '1M', ram: '256K' })).toThrow(/needs --clock-mhz, --macs-per-cycle/);
    const t = resolveTarget({ flash: '1M', ram: '256K', clockMhz: '80', macsPerCycle: '0.5' })!;
    expect(t.int8MacsPerCycle).toEqual(t.macsPerCycle);
    expect(() => resolveTarget({ target: 'm9000' })).toThrow(/neither a profile file nor a built-in profile/);
  });
});

// x[1,3,8,8] → Conv(W[4,3,3,3], B[4], pad 1) → y → Relu → r | cut | → GlobalAveragePool → p → Flatten → f → Gemm(W[10,4], b[10], transB) → logits
function tinyNet() {
  return model([
    node('Conv', ['x', 'W', 'B'], ['y'], [ints('kernel_shape', [3, 3]), ints('pads', [1, 1, 1, 1])], 'conv'),
    node('Relu', ['y'], ['r'], [], 'relu'),
    node('GlobalAveragePool', ['r'], ['p'], [], 'gap'),
    node('Flatten', ['p'], ['f'], [int('axis', 1)], 'flatten'),
    node('Gemm', ['f', 'Wg', 'bg'], ['logits'], [int('transB', 1)], 'fc'),
  ], [vi('x', [1, 3, 8, 8])], [vi('logits', [1, 10])],
  [floatTensor('W', [4, 3, 3, 3]), floatTensor('B', [4]), floatTensor('Wg', [10, 4]), floatTensor('bg', [10])]);
}

describe('stage footprints (hand-computed)', () => {
  it('weights, peak and handover as stored and in int8', () => {
    const m = tinyNet();
    const r = costModel(m, { cuts: ['r'] });
    expect(r.stages.map((s) => s.macs)).toEqual([6912n, 40n]); // conv 4·8·8 outputs × 3·3·3; gemm 10×4
    const f = stageFootprints(m, r);
    // Stored: W 108·4 + B 4·4 = 448; Wg 40·4 + bg 10·4 = 200.
    // Activations (B): x 768, y 1024, r 1024, p 16, f 16, logits 40; steps conv 0, relu 1 | gap 2, flatten 3, gemm 4.
    // Stage 0 peak at relu: y + r = 2048; hands r (1024) out. Stage 1 peak at gap: r + p = 1040; r comes in.
    // Arenas: stage 0 y@0, r@1024 (meets y), x@1024 (meets y only) → 2048; stage 1 r@0, p@1024, f@0 (meets p only),
    // logits@16 (meets f only, 16-byte offsets) → 1040. Both equal the peak: nothing fragments.
    expect(f[0].stored).toEqual({ weightBytes: 448n, peakBytes: 2048n, arenaBytes: 2048n, handoverInBytes: 0n, handoverOutBytes: 1024n });
    expect(f[1].stored).toEqual({ weightBytes: 200n, peakBytes: 1040n, arenaBytes: 1040n, handoverInBytes: 1024n, handoverOutBytes: 0n });
    // int8: W 108 + 4 channels × (4-byte scale + 1-byte zero point) = 128, B int32 16 → 144; Wg 40 + 10 × 5 = 90, bg 40 → 130.
    // Activations one byte per element: stage 0 peak 256 + 256, out 256; stage 1 peak 256 + 4.
    expect(f[0].int8).toEqual({ weightBytes: 144n, peakBytes: 512n, arenaBytes: 512n, handoverInBytes: 0n, handoverOutBytes: 256n });
    expect(f[1].int8).toEqual({ weightBytes: 130n, peakBytes: 260n, arenaBytes: 260n, handoverInBytes: 256n, handoverOutBytes: 0n });
    // The stored figures agree with the cost report's own.
    r.stages.forEach((s, k) => { expect(f[k].stored.weightBytes).toBe(s.paramBytes); expect(f[k].stored.peakBytes).toBe(s.peakActivationBytes); });
  });
  it('a value passing through a stage waits in a handover buffer, counted once, not in the stage', () => {
    // a = Relu(x), a2 = Sigmoid(a) | b = Relu(a2) | y = Add(a, b); every tensor [1,100] float32 = 400 B.
    // a is made in stage 0 and read in stage 2 only: it passes through stage 1.
    const m = model([
      node('Relu', ['x'], ['a']), node('Sigmoid', ['a'], ['a2']), node('Relu', ['a2'], ['b']), node('Add', ['a', 'b'], ['y']),
    ], [vi('x', [1, 100])], [vi('y', [1, 100])]);
    const r = costModel(m, { cuts: ['a2', 'b'] });
    expect(r.stages[1].peakActivationBytes).toBe(1200n); // the report's view over the whole order: a + a2 + b
    const f = stageFootprints(m, r).map((s) => s.stored);
    // Stage 0: own peak x + a = a + a2 = 800; hands a and a2 out (800).
    expect(f[0]).toMatchObject({ peakBytes: 800n, arenaBytes: 800n, handoverInBytes: 0n, handoverOutBytes: 800n });
    // Stage 1: own peak a2 + b = 800; buffers a, a2 in (800) and b out (400); a counts once though it crosses both boundaries.
    expect(f[1]).toMatchObject({ peakBytes: 800n, handoverInBytes: 800n, handoverOutBytes: 400n });
    // Stage 2: own peak a + b + y = 1200; a and b come in.
    expect(f[2]).toMatchObject({ peakBytes: 1200n, arenaBytes: 1200n, handoverInBytes: 800n, handoverOutBytes: 0n });
  });
  it('int8: BatchNormalization folds into the conv before it', () => {
    const m = model([
      node('Conv', ['x', 'W'], ['c'], [ints('kernel_shape', [3, 3]), ints('pads', [1, 1, 1, 1])]),
      node('BatchNormalization', ['c', 's', 'b', 'mean', 'var'], ['y']),
    ], [vi('x', [1, 3, 8, 8])], [vi('y', [1, 4, 8, 8])],
    [floatTensor('W', [4, 3, 3, 3]), ...['s', 'b', 'mean', 'var'].map((n) => floatTensor(n, [4]))]);
    const [s] = stageFootprints(m, costModel(m));
    expect(s.stored.weightBytes).toBe(432n + 4n * 16n);
    // W 108 + 4 × 5 (scale, zero point) = 128; the BN becomes a 4-channel int32 bias: 16.
    expect(s.int8.weightBytes).toBe(144n);
  });
  it('the whole model is one stage without handover', () => {
    const m = tinyNet();
    const [s] = stageFootprints(m, costModel(m));
    expect(s.stored).toEqual({ weightBytes: 648n, peakBytes: 2048n, arenaBytes: 2048n, handoverInBytes: 0n, handoverOutBytes: 0n });
  });
});

describe('budget arithmetic (hand-computed)', () => {
  const t: Target = { name: 'hand', flashBytes: 512n, ramBytes: 3000n, clockMhz: parseRatio('1'), macsPerCycle: parseRatio('0.5'), int8MacsPerCycle: parseRatio('2') };
  it('verdicts, margins and latency per stage', () => {
    const m = tinyNet();
    const b = budgetOf(m, costModel(m, { cuts: ['r'] }), t);
    const [s0, s1] = b.stages;
    // Stage 0: flash 448 of 512 → +64 (12.5%); RAM 2048 + 1024 = 3072 of 3000 → −72 (−2.4%).
    expect(s0.stored.flash).toEqual({ need: 448n, limit: 512n, margin: 64n, marginPercent: 12.5, fits: true });
    expect(s0.stored.ram).toEqual({ need: 3072n, limit: 3000n, margin: -72n, marginPercent: -2.4, fits: false });
    // 6912 MACs at 0.5 per cycle = 13824 cycles; at 1 MHz, 13.824 ms. int8 at 2 per cycle: 3456 cycles.
    expect([s0.stored.cycles, s0.stored.latencyNs, s0.int8.cycles, s0.int8.latencyNs]).toEqual([13824n, 13824000n, 3456n, 3456000n]);
    // Stage 1: flash 200 → +312 (312/512 = 60.9375% → 60.93 truncated); RAM 1040 + 1024 = 2064 → +936 (31.2%); 40 MACs → 80 cycles.
    expect(s1.stored.flash.marginPercent).toBe(60.93);
    expect(s1.stored.ram).toMatchObject({ need: 2064n, margin: 936n, marginPercent: 31.2, fits: true });
    expect([s1.stored.cycles, s1.stored.cumulativeNs]).toEqual([80n, 13904000n]);
    // All stages: 648 B of flash → −136 (−26.56%); RAM is the largest stage's, 3072.
    expect(b.all.stored.flash).toMatchObject({ need: 648n, margin: -136n, marginPercent: -26.56, fits: false });
    expect(b.all.stored.ram.need).toBe(3072n);
    expect(b.fits).toBe(false);
    expect(b.over.map((o) => [o.stage, o.resource, o.margin])).toEqual([[0, 'ram', -72n], ['all', 'flash', -136n]]);
    // int8: 144 + 130 = 274 B of flash, RAM 512 + 256 = 768: everything fits.
    const b8 = budgetOf(m, costModel(m, { cuts: ['r'] }), t, 'int8');
    expect(b8.fits).toBe(true);
    expect(b8.all.int8.flash.need).toBe(274n);
    expect(b8.stages[0].int8.ram.need).toBe(768n);
  });
  it('rounds cycles and time up, exactly, at fractional rates and clocks', () => {
    expect(cyclesFor(10n, parseRatio('3'))).toBe(4n);
    expect(cyclesFor(0n, parseRatio('3'))).toBe(0n);
    expect(nanosFor(16384n, parseRatio('16.384'))).toBe(1000000n);
    expect(nanosFor(1n, parseRatio('3'))).toBe(334n);
    // Beyond 2^53 the arithmetic stays exact.
    expect(cyclesFor(2n ** 60n + 1n, parseRatio('1'))).toBe(2n ** 60n + 1n);
  });
  it('a margin of exactly zero fits', () => {
    expect(fit(512n, 512n)).toEqual({ need: 512n, limit: 512n, margin: 0n, marginPercent: 0, fits: true });
  });
  it('checkBudget needs only the footprints', () => {
    const z = { weightBytes: 0n, peakBytes: 0n, arenaBytes: 0n, handoverInBytes: 0n, handoverOutBytes: 0n };
    const b = checkBudget([{ index: 0, cut: '', macs: 0n, stored: { ...z, weightBytes: 513n }, int8: z }], t);
    // −1/512 = −0.1953% → −0.19 (truncated toward zero)
    expect(b.over).toEqual([{ stage: 0, cut: '', resource: 'flash', precision: 'stored', need: 513n, limit: 512n, margin: -1n, marginPercent: -0.19 }]);
  });
  it('the RAM verdict counts the arena, not the live-set peak', () => {
    // A plan that fragments: peak 2900 fits 3000, the arena 2990 plus 16 B of handover does not (3006, over by 6).
    const z = { weightBytes: 0n, peakBytes: 2900n, arenaBytes: 2990n, handoverInBytes: 6n, handoverOutBytes: 10n };
    const b = checkBudget([{ index: 0, cut: '', macs: 0n, stored: z, int8: z }], t);
    expect(b.stages[0].stored.ram).toMatchObject({ need: 3006n, margin: -6n, fits: false });
    expect(b.stages[0].stored).toMatchObject({ peakBytes: 2900n, arenaBytes: 2990n, handoverBytes: 16n });
  });
});

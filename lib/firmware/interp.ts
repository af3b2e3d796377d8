// The integer program run in TypeScript: the reference the C library must equal bit for bit. It
// keeps memory as the firmware does (one arena every stage reuses, handover buffers, each exit's
// logits), so a plan that let two live tensors share bytes would corrupt both alike, and runs
// stages only when the policy asks for an exit, as offramp_classify does.
import { conv } from '../kernels/conv.js';
import { dense } from '../kernels/dense.js';
import { avgpool, maxpool } from '../kernels/pool.js';
import { quantizeInput, rescale } from '../kernels/misc.js';
import { chainFor, fullModel, isStream, runFrame, type Chain, type ExitView, type FramePolicy, type Policy } from '../policy/policy.js';
import { streamStart, streamStep, type StreamState } from '../policy/stream.js';
import { OfframpError } from '../errors.js';
import type { Program, Tensor8 } from './program.js';

export class Int8Machine {
  readonly arena: Int8Array;
  readonly handover: Int8Array[];
  readonly logits: Int8Array[];
  /** stages run for the current frame */
  done = 0;
  constructor(readonly program: Program) {
    this.arena = new Int8Array(program.arenaBytes);
    this.handover = program.handovers.map((t) => new Int8Array(t.size));
    this.logits = program.logits.map((t) => new Int8Array(t.size));
  }
  view(t: Tensor8): Int8Array {
    const s = t.slot;
    if (s.kind === 'arena') return this.arena.subarray(s.offset, s.offset + t.size);
    return s.kind === 'handover' ? this.handover[s.index] : this.logits[s.exit];
  }
  /** A float32 frame in the model's input layout, quantized as the entry point does. */
  load(x: ArrayLike<number>): void {
    const t = this.program.input.tensor;
    if (x.length !== t.size) throw new OfframpError('usage', `a frame has ${t.size} values, got ${x.length}`);
    quantizeInput(x, t.scale, t.zeroPoint, this.view(t));
    this.done = 0;
  }
  loadQ8(x: Int8Array): void {
    const t = this.program.input.tensor;
    if (x.length !== t.size) throw new OfframpError('usage', `a frame has ${t.size} values, got ${x.length}`);
    this.view(t).set(x);
    this.done = 0;
  }
  /** Run stage k; `seen` receives every int8 tensor a step writes (a copy), by name. */
  runStage(k: number, seen?: Map<string, Int8Array>): void {
    for (const s of this.program.stages[k].steps) {
      const x = this.view(s.x), y = this.view(s.y);
      switch (s.kind) {
        case 'conv': conv(s.p, x, y); break;
        case 'dense': dense(s.p, x, y); break;
        case 'maxpool': maxpool(s.p, x, y); break;
        case 'avgpool': avgpool(s.p, x, y); break;
        case 'copy': y.set(x.subarray(0, s.n)); break;
        case 'rescale': rescale(s.p, x, y); break;
      }
      seen?.set(s.y.name, Int8Array.from(y));
    }
  }
  runTo(stage: number, seen?: Map<string, Int8Array>): void {
    while (this.done <= stage) this.runStage(this.done++, seen);
  }
  /** Exit k's logits as float32, (q − zero point) · scale as DequantizeLinear computes them. */
  dequantized(k: number): Float32Array {
    const t = this.program.logits[k], q = this.logits[k];
    return Float32Array.from(q, (v) => Math.fround(Math.fround(v - t.zeroPoint) * Math.fround(t.scale)));
  }
}

export interface Answer { label: number; exit: number; reused: boolean }

/** The policy over the machine, stage by stage as offramp_classify runs it; `reach`: MACs to each exit (a budget's cap). */
export class Int8Classifier {
  /** the chain the frame policy (a stream's `then`) walks with, as replay sets it */
  readonly chain: Chain;
  private stream?: StreamState;
  constructor(readonly machine: Int8Machine, readonly policy: Policy, reach: ArrayLike<number>) {
    const p = machine.program, exits = p.logits.length - 1;
    const frame: FramePolicy = isStream(policy) ? policy.then ?? fullModel(exits) : policy;
    this.chain = chainFor(frame, reach, exits, p.classes);
    this.reset();
  }
  /** A new recording: forget the stream state. */
  reset(): void { if (isStream(this.policy)) this.stream = streamStart(this.machine.program.classes); }
  classify(x: ArrayLike<number>): Answer { this.machine.load(x); return this.decide(); }
  classifyQ8(x: Int8Array): Answer { this.machine.loadQ8(x); return this.decide(); }
  private decide(): Answer {
    const m = this.machine;
    const v: ExitView = { data: (k) => { m.runTo(m.program.exitStage[k]); return m.dequantized(k); }, offset: () => 0 };
    if (isStream(this.policy)) {
      const r = streamStep(this.policy, this.stream!, v, this.chain);
      return { label: r.label, exit: r.exit, reused: r.reused };
    }
    const r = runFrame(this.policy, this.chain, v, 0);
    return { label: r.label, exit: r.exit, reused: false };
  }
}

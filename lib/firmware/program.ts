// The integer program of a quantized chain: what the int8 firmware executes, stage by stage, as
// data. `lower.ts` makes it from the QDQ stage files, `interp.ts` runs it in TypeScript (the
// reference), `tables.ts` writes it as the C tables that offramp_run.c walks.
import type { AddParams, ConcatParams, ConvParams, DenseParams, LutParams, MulParams, PoolParams, RescaleParams, SliceParams, TransposeParams } from '../kernels/types.js';

/** Where an int8 tensor lives on the device. */
export type Slot =
  /** in the one arena every stage reuses, at the stage's planned offset */
  | { kind: 'arena'; offset: number }
  /** a buffer of its own that outlives its stage: a value handed to a later stage */
  | { kind: 'handover'; index: number }
  /** an exit's int8 logits (the final output's at index `exits`), kept for the policy */
  | { kind: 'logits'; exit: number };

export interface Tensor8 {
  name: string;
  /** elements (batch 1) */
  size: number;
  shape: number[];
  scale: number;
  zeroPoint: number;
  slot: Slot;
}

interface StepBase { node: string; x: Tensor8; y: Tensor8 }
export type Step =
  | StepBase & { kind: 'conv'; p: ConvParams }
  | StepBase & { kind: 'dense'; p: DenseParams }
  | StepBase & { kind: 'maxpool'; p: PoolParams }
  | StepBase & { kind: 'avgpool'; p: PoolParams }
  | StepBase & { kind: 'copy'; n: number }
  | StepBase & { kind: 'rescale'; p: RescaleParams }
  /** x is a, x2 is b (the broadcast operand) */
  | StepBase & { kind: 'add'; x2: Tensor8; p: AddParams }
  | StepBase & { kind: 'mul'; x2: Tensor8; p: MulParams }
  | StepBase & { kind: 'lut'; p: LutParams }
  /** xs: every part in order (x is the first) */
  | StepBase & { kind: 'concat'; xs: Tensor8[]; p: ConcatParams }
  | StepBase & { kind: 'transpose'; p: TransposeParams }
  /** one output of a Split (a Split of k parts is k steps) */
  | StepBase & { kind: 'slice'; p: SliceParams };

/** Every int8 tensor a step reads, in order. */
export function stepInputs(s: Step): Tensor8[] {
  if (s.kind === 'concat') return s.xs;
  if (s.kind === 'add' || s.kind === 'mul') return [s.x, s.x2];
  return [s.x];
}

export interface ProgramStage {
  index: number;
  file: string;
  steps: Step[];
  /** bytes of the arena this stage uses (its plan's) */
  arenaBytes: number;
  macs: number;
}

export interface Program {
  stages: ProgramStage[];
  /** the model's input: float32 values quantized into `tensor` */
  input: { name: string; tensor: Tensor8 };
  handovers: Tensor8[];
  /** exit k's int8 logits, the final output's last */
  logits: Tensor8[];
  exitStage: number[];
  classes: number;
  /** the largest stage arena: one block serves every stage in turn */
  arenaBytes: number;
  arenaAlign: number;
}

/** Bytes a slot's tensor takes outside the arena. */
export const handoverBytes = (p: Program) => p.handovers.reduce((a, t) => a + t.size, 0);

/** Multiply-accumulates of one step, as the cost report counts them (convolutions and matrix products; 0 for the rest). */
export function stepMacs(s: Step): number {
  if (s.kind === 'conv') { const p = s.p; return p.outH * p.outW * p.outC * (p.inC / p.groups) * p.kH * p.kW; }
  if (s.kind === 'dense') return s.p.in * s.p.out;
  return 0;
}

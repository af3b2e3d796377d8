// The contract of an operator rule. One small rule per operator (per opset range
// where its semantics changed): output types from input types, constant values
// for shape arithmetic, and the arithmetic cost, side by side.
import type { Dim, Node, TensorType } from '../graph/ir.js';
import type { AttributeProto } from '../onnx/types.js';
import { tensorDims, tensorNumbers } from '../onnx/tensor.js';

/** A small tensor whose values are known at analysis time (shape arithmetic). */
export interface Const { dtype: number; dims: number[]; data: number[] }

/** What is known about a value: its type, and for small constants its values. */
export interface Known { type: TensorType; value?: Const }

export interface Attrs {
  has(name: string): boolean;
  int(name: string, def: number): number;
  int(name: string): number | undefined;
  ints(name: string, def: number[]): number[];
  ints(name: string): number[] | undefined;
  float(name: string, def: number): number;
  floats(name: string): number[] | undefined;
  str(name: string, def: string): string;
  str(name: string): string | undefined;
  tensor(name: string): Const | undefined;
  raw(name: string): AttributeProto | undefined;
}

export interface InferCtx extends Attrs {
  node: Node;
  /** opset of the node's domain */
  opset: number;
  /** Per input slot; undefined where the input is omitted or not known. */
  inputs: (Known | undefined)[];
  /** Number of input slots given (including omitted ''). */
  arity: number;
  /** A fresh symbolic dim (for data-dependent sizes that are not measured). */
  fresh(hint: string): string;
}

/** Concrete shapes for costing: every dim bound to a number. */
export interface CostCtx extends Attrs {
  node: Node;
  opset: number;
  inputs: (number[] | undefined)[];
  inputTypes: (number | undefined)[];
  outputs: number[][];
}

/** MACs (multiply-accumulates) and other arithmetic operations, exact. */
export interface Cost { macs: bigint; ops: bigint }

export interface OpRule {
  op: string;
  /** '' (ai.onnx) by default */
  domain?: string;
  /** first opset version this rule covers; it holds until the next rule's `since` */
  since?: number;
  /** Output types (and values, where they fold); undefined entries are unknown. */
  infer(c: InferCtx): (Known | undefined)[];
  /** Arithmetic cost; absent means the op does no arithmetic (data movement). */
  cost?(c: CostCtx): Cost;
}

// ---- helpers shared by rules ----

export const isNum = (d: Dim | undefined): d is number => typeof d === 'number';
export const prod = (xs: readonly number[]): bigint => xs.reduce((a, b) => a * BigInt(b), 1n);
export const numel = (shape: readonly number[]): bigint => prod(shape);
export const none: Cost = { macs: 0n, ops: 0n };
/** One arithmetic operation per output element, summed over outputs. */
export const perOutput = (k = 1n) => (c: CostCtx): Cost => ({ macs: 0n, ops: k * c.outputs.reduce((s, o) => s + numel(o), 0n) });

/** Normalise a possibly negative axis against a rank. */
export function axis(a: number, rank: number): number {
  const r = a < 0 ? a + rank : a;
  if (r < 0 || r >= rank) throw new RangeError(`axis ${a} out of range for rank ${rank}`);
  return r;
}

export function dimMul(a: Dim, b: Dim): Dim {
  if (isNum(a) && isNum(b)) return a * b;
  if (a === 1) return b;
  if (b === 1) return a;
  return `${a}*${b}`;
}

/** Numpy-style multidirectional broadcast; undefined if the shapes clash or a rank is unknown. */
export function broadcast(...shapes: (Dim[] | undefined)[]): Dim[] | undefined {
  if (shapes.some((s) => s === undefined)) return undefined;
  const rank = Math.max(0, ...shapes.map((s) => s!.length));
  const out: Dim[] = [];
  for (let i = 0; i < rank; i++) {
    let d: Dim = 1;
    for (const s of shapes as Dim[][]) {
      const x = s[s.length - rank + i];
      if (x === undefined || x === 1) continue;
      if (d === 1) d = x;
      else if (d !== x) {
        if (isNum(d) && isNum(x)) return undefined;
        if (!isNum(x)) continue; // symbol vs number: the number wins (symbol must be 1 or equal)
        d = x;
      }
    }
    out.push(d);
  }
  return out;
}

export function constFromTensor(t: import('../onnx/types.js').TensorProto): Const | undefined {
  const data = tensorNumbers(t);
  return data && { dtype: t.dataType ?? 0, dims: tensorDims(t), data };
}

/** A Known for a tensor of this dtype and shape. */
export const known = (dtype: number, shape: Dim[] | undefined, value?: Const): Known => ({ type: { dtype, shape }, ...(value && { value }) });
/** Same type as input i with another shape. */
export const like = (c: InferCtx, i: number, shape?: Dim[]): Known | undefined => {
  const k = c.inputs[i];
  return k && { type: { dtype: k.type.dtype, shape: shape ?? k.type.shape } };
};
export const shapeOf = (c: InferCtx, i: number): Dim[] | undefined => c.inputs[i]?.type.shape;
export const valueOf = (c: InferCtx, i: number): number[] | undefined => c.inputs[i]?.value?.data;

// Attach fitted heads as extra graph outputs exit-0, exit-1 … (logits). The
// original nodes, initializers and outputs are kept as they are, so the original
// outputs stay bit-identical; model metadata "offramp.exits" records each exit.
import type { Dim, Model } from '../graph/ir.js';
import { modelFromProto, modelToProto, typeToProto } from '../graph/ir.js';
import { FLOAT } from '../onnx/dtype.js';
import { EXITS_KEY, exitOutputs } from '../cuts/exits.js';
import { OfframpError } from '../errors.js';
import { emitClassifier, emitFeatures, emitter, type Dense, type Emitter } from './nodes.js';
import type { Axes } from './spec.js';
import type { HeadTrial } from './choose.js';

export { EXITS_KEY };

export interface FitStats {
  /** training objective at the fitted parameters */
  loss: number;
  /** against the labels, on the held-out rows (all rows without a held-out split) */
  accuracy?: number;
  /** argmax agreement with the model's final output, same rows */
  agreement: number;
  /** rows fitted on, rows held out */
  samples: number; heldOut: number;
}

/** One exit as the metadata records it. */
export interface ExitRecord {
  exit: number; output: string; cut: string; head: string; layout: string;
  classes: number; macs: number; params: number; fit: FitStats;
  /** when the head was chosen, not named: the rule and every head tried (heads/choose.ts) */
  choice?: { rule: string; tried: HeadTrial[] };
}

/** Where a head reads and how: the cut tensor's rank and axes, an optional 1×1 projection, an optional pooling grid (window per pooled axis). */
export interface HeadInput { cut: string; rank: number; axes: Axes; proj?: Dense; grid?: number[] }

export interface FittedHead extends HeadInput { layers: Dense[]; record: ExitRecord }

export const exitName = (k: number) => `exit-${k}`;

/** The exit records of a grafted model ([] if it has none). */
export function exitRecords(model: Model): ExitRecord[] {
  const raw = model.proto.metadataProps?.find((p) => p.key === EXITS_KEY)?.value;
  if (!raw) return [];
  try { return JSON.parse(raw) as ExitRecord[]; } catch {
    throw new OfframpError('decode', `metadata '${EXITS_KEY}' is not valid JSON`, (model as { file?: string }).file);
  }
}

function assertNoExits(model: Model): void {
  const file = (model as { file?: string }).file;
  if (exitOutputs(model).length || exitRecords(model).length)
    throw new OfframpError('graph', 'the model already has exits; graft onto the original model', file);
}

/** A copy of the model with `extraNodes` appended and `outputs` added after the original outputs. */
function extend(model: Model, e: Emitter, outputs: { name: string; classes?: number; batch: Dim }[], meta?: string): Model {
  const proto = modelToProto(model);
  const g = proto.graph!;
  const have = new Set((g.output ?? []).map((o) => o.name));
  const graph = {
    ...g,
    node: [...(g.node ?? []), ...e.nodes],
    initializer: [...(g.initializer ?? []), ...e.inits],
    output: [...(g.output ?? []), ...outputs.filter((o) => !have.has(o.name)).map((o) => ({
      name: o.name, ...(o.classes !== undefined && { type: typeToProto({ dtype: FLOAT, shape: [o.batch, o.classes] }) }),
    }))],
  };
  const metadataProps = [...(proto.metadataProps ?? []).filter((p) => p.key !== EXITS_KEY), ...(meta !== undefined ? [{ key: EXITS_KEY, value: meta }] : [])];
  return modelFromProto({ ...proto, graph, ...(metadataProps.length && { metadataProps }) });
}

/** The capture copy: every head's feature path (projection, pooling) exposed as an output. Returns the feature output names too. */
export function captureModel(model: Model, inputs: HeadInput[]): { model: Model; features: string[] } {
  const e = emitter(model);
  const features = inputs.map((h, k) => emitFeatures(e, h.cut, h.axes, h.rank, h.proj, `capture-${k}`, h.grid));
  return { model: extend(model, e, features.map((name) => ({ name, batch: '' }))), features };
}

/** Attach fitted heads, in order, as exit-0, exit-1 …, and record them in the metadata. */
export function graftHeads(model: Model, heads: FittedHead[], batch: Dim = 'N'): Model {
  assertNoExits(model);
  const e = emitter(model);
  heads.forEach((h, k) => {
    const out = exitName(k);
    if (model.graph.nodes.some((n) => n.outputs.includes(out)) || model.graph.initializers.has(out) || model.graph.inputs.some((v) => v.name === out))
      throw new OfframpError('graph', `the graph already has a value named '${out}'`, (model as { file?: string }).file);
    emitClassifier(e, emitFeatures(e, h.cut, h.axes, h.rank, h.proj, out, h.grid), h.layers, out, out);
  });
  const records = heads.map((h, k) => ({ ...h.record, exit: k, output: exitName(k) }));
  return extend(model, e, heads.map((h, k) => ({ name: exitName(k), classes: h.record.classes, batch })), JSON.stringify(records));
}

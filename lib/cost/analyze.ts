// Shapes for costing: static rules first; what they cannot type is measured once
// in onnxruntime, and the report marks those values as measured.
import type { Model } from '../graph/ir.js';
import { inferShapes, type InferOptions, type ShapeResult } from '../shapes/infer.js';
import { measureShapes } from '../runtime/ort.js';
import { OfframpError } from '../errors.js';
import { costModel, type CostOptions, type CostReport } from './report.js';

export async function completeShapes(model: Model & { file?: string }, opts: InferOptions = {}): Promise<ShapeResult> {
  const shapes = inferShapes(model, opts);
  const missing = [...new Set([...shapes.unknown, ...model.graph.outputs.map((o) => o.name).filter((o) => !shapes.values.get(o)?.type.shape?.every((d) => typeof d === 'number'))])];
  // Values whose dims are still symbolic after binding also need measuring.
  for (const [name, v] of shapes.values) {
    if (v.source === 'rule' && v.type.shape?.some((d) => typeof d === 'string' && d.includes('#'))) missing.push(name);
  }
  if (!missing.length) return shapes;
  const inputs = new Map<string, { dtype: number; shape: number[] }>();
  for (const v of model.graph.inputs) {
    if (model.graph.initializers.has(v.name)) continue;
    const t = shapes.values.get(v.name)?.type;
    if (!t?.shape || t.shape.some((d) => typeof d !== 'number')) {
      const sym = t?.shape?.find((d) => typeof d !== 'number');
      throw new OfframpError('shape', `graph input '${v.name}' has unbound dim '${sym ?? '?'}'; give it with --dim`, model.file);
    }
    inputs.set(v.name, { dtype: t.dtype, shape: t.shape as number[] });
  }
  const got = await measureShapes(model, [...new Set(missing)], inputs, model.file);
  for (const [name, t] of got) shapes.values.set(name, { type: t, source: 'measured' });
  shapes.unknown = shapes.unknown.filter((n) => !got.has(n));
  return shapes;
}

export async function analyzeModel(model: Model & { file?: string }, opts: CostOptions = {}): Promise<CostReport> {
  const shapes = opts.shapes ?? (await completeShapes(model, opts));
  return costModel(model, { ...opts, shapes });
}

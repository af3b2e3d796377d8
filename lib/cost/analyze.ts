// Shapes for costing: static rules first; what they cannot type is measured once
// in onnxruntime, and the report marks those values as measured.
import type { Model } from '../graph/ir.js';
import { inferShapes, type InferOptions, type ShapeResult } from '../shapes/infer.js';
import { measureShapes } from '../runtime/ort.js';
import { OfframpError } from '../errors.js';
import { loadModel } from '../graph/io.js';
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

/** The options as the CLI's cost checks them; a wrong one is an error naming it, not a TypeError deep inside. */
function checkCostOptions(opts: unknown): CostOptions {
  const bad = (opt: string, what: string, v: unknown) => new OfframpError('usage', `analyzeModel: option '${opt}' takes ${what}, not ${JSON.stringify(v) ?? String(v)}`);
  if (opts === undefined) return {};
  if (!opts || typeof opts !== 'object' || Array.isArray(opts)) throw new OfframpError('usage', `analyzeModel: options must be an object, not ${JSON.stringify(opts)}`);
  const o = opts as CostOptions;
  if (o.cuts !== undefined && !(Array.isArray(o.cuts) && o.cuts.every((c) => typeof c === 'string' && c))) throw bad('cuts', 'a list of value or node names', o.cuts);
  if (o.stageEnds !== undefined && !(Array.isArray(o.stageEnds) && o.stageEnds.every((x) => Number.isSafeInteger(x) && x >= 0))) throw bad('stageEnds', 'a list of node positions', o.stageEnds);
  if (o.batch !== undefined && !(Number.isSafeInteger(o.batch) && o.batch >= 1)) throw bad('batch', 'a whole number from 1', o.batch);
  if (o.dims !== undefined && !(o.dims && typeof o.dims === 'object' && Object.values(o.dims).every((d) => Number.isSafeInteger(d) && d >= 1))) throw bad('dims', '{ name: whole number from 1, … }', o.dims);
  return o;
}

/** Cost a model (a loaded one, or a file path, loaded here). */
export async function analyzeModel(model: (Model & { file?: string }) | string, options: CostOptions = {}): Promise<CostReport> {
  const opts = checkCostOptions(options);
  if (typeof model === 'string') model = loadModel(model);
  else if (!model || typeof model !== 'object' || !(model as Model).graph || !Array.isArray((model as Model).graph.nodes))
    throw new OfframpError('usage', `analyzeModel takes a model (loadModel(file)) or a file path, not ${JSON.stringify(model)?.slice(0, 40) ?? typeof model}`);
  const shapes = opts.shapes ?? (await completeShapes(model, opts));
  return costModel(model, { ...opts, shapes });
}

// ONNX external data: tensors whose bytes live in files beside the model.
// Locations are confined to the model's folder, links included.
import fs from 'node:fs';
import path from 'node:path';
import type { ModelProto, TensorProto, GraphProto } from './types.js';
import { OfframpError } from '../errors.js';
import { readRegular } from '../util/fsx.js';
import { tensorByteSize } from './tensor.js';

export const EXTERNAL = 1;
const entry = (t: TensorProto, key: string) => t.externalData?.find((e) => e.key === key)?.value;

/** Every TensorProto in the model that can hold data: initializers, Constant/attribute tensors, bodies too. */
export function* allTensors(m: ModelProto): Generator<TensorProto> {
  function* graph(g: GraphProto | undefined): Generator<TensorProto> {
    if (!g) return;
    yield* g.initializer ?? [];
    for (const s of g.sparseInitializer ?? []) { if (s.values) yield s.values; if (s.indices) yield s.indices; }
    for (const n of g.node ?? []) for (const a of n.attribute ?? []) {
      if (a.t) yield a.t;
      yield* a.tensors ?? [];
      yield* graph(a.g);
      for (const sg of a.graphs ?? []) yield* graph(sg);
    }
  }
  yield* graph(m.graph);
  for (const f of m.functions ?? []) yield* graph({ node: f.node });
  for (const t of m.trainingInfo ?? []) { yield* graph(t.initialization); yield* graph(t.algorithm); }
}

/** Resolve a location against the model folder, refusing anything that leaves it. */
export function confinedPath(modelFile: string, location: string): string {
  const dir = path.dirname(path.resolve(modelFile));
  const bad = (why: string) => new OfframpError('io', `external data location '${location}' ${why}`, modelFile);
  if (!location) throw bad('is empty');
  if (path.isAbsolute(location) || /^[a-zA-Z]:/.test(location) || location.startsWith('\\')) throw bad('is absolute');
  if (location.split(/[\\/]/).includes('..')) throw bad("contains '..'");
  const full = path.resolve(dir, location);
  let real: string;
  try { real = fs.realpathSync(full); } catch { throw bad('does not exist'); }
  const realDir = fs.realpathSync(dir);
  if (real !== realDir && !real.startsWith(realDir + path.sep)) throw bad('resolves outside the model folder');
  return real;
}

/**
 * Load external tensors in place: each gets raw_data as a view into its file,
 * and keeps its external_data entries so the origin stays known. Files are read
 * once each.
 */
export function loadExternalData(m: ModelProto, modelFile: string): number {
  const files = new Map<string, Buffer>();
  let count = 0;
  for (const t of allTensors(m)) {
    if (t.dataLocation !== EXTERNAL) continue;
    const loc = entry(t, 'location') ?? '';
    const where = `tensor '${t.name ?? ''}'`;
    const file = confinedPath(modelFile, loc);
    let buf = files.get(file);
    if (!buf) { buf = readRegular(file, 'external data'); files.set(file, buf); }
    const offset = Number(entry(t, 'offset') ?? '0');
    const want = Number(tensorByteSize(t));
    const length = entry(t, 'length') !== undefined ? Number(entry(t, 'length')) : want;
    if (!Number.isSafeInteger(offset) || offset < 0 || !Number.isSafeInteger(length) || length < 0)
      throw new OfframpError('io', `external data offset/length is not a valid number`, modelFile, where);
    if (offset + length > buf.length)
      throw new OfframpError('io', `external data [${offset}, ${offset + length}) runs past the end of '${loc}' (${buf.length} bytes)`, modelFile, where);
    if (length !== want) throw new OfframpError('io', `external data length ${length} does not match ${want} bytes implied by its dims and type`, modelFile, where);
    t.rawData = buf.subarray(offset, offset + length);
    count++;
  }
  return count;
}

export interface ExternalPlan { file: string; threshold: number }

/**
 * Prepare a model for writing: tensors loaded from external files are written
 * inline again unless `plan` asks for external data, in which case every tensor
 * of at least `threshold` bytes goes, 64-byte aligned, into one file. Returns
 * the message to encode and the chunks of the external file.
 */
export function placeTensors(m: ModelProto, plan?: ExternalPlan): { model: ModelProto; chunks: Uint8Array[] } {
  const chunks: Uint8Array[] = [];
  let offset = 0;
  const swap = new Map<TensorProto, TensorProto>();
  for (const t of allTensors(m)) {
    const raw = t.rawData;
    if (plan && raw && raw.length >= plan.threshold) {
      const pad = (64 - (offset % 64)) % 64;
      if (pad) chunks.push(new Uint8Array(pad));
      offset += pad;
      const { rawData: _, externalData: __, dataLocation: ___, ...rest } = t;
      swap.set(t, {
        ...rest, dataLocation: EXTERNAL,
        externalData: [{ key: 'location', value: plan.file }, { key: 'offset', value: String(offset) }, { key: 'length', value: String(raw.length) }],
      });
      chunks.push(raw);
      offset += raw.length;
    } else if (t.dataLocation === EXTERNAL) {
      const { externalData: _, dataLocation: __, ...rest } = t;
      swap.set(t, rest);
    }
  }
  return { model: swap.size ? replaceTensors(m, swap) : m, chunks };
}

function replaceTensors(m: ModelProto, swap: Map<TensorProto, TensorProto>): ModelProto {
  const T = (t: TensorProto) => swap.get(t) ?? t;
  const G = (g: GraphProto | undefined): GraphProto | undefined => g && {
    ...g,
    ...(g.initializer && { initializer: g.initializer.map(T) }),
    ...(g.sparseInitializer && { sparseInitializer: g.sparseInitializer.map((s) => ({ ...s, ...(s.values && { values: T(s.values) }), ...(s.indices && { indices: T(s.indices) }) })) }),
    ...(g.node && {
      node: g.node.map((n) => ({
        ...n,
        ...(n.attribute && { attribute: n.attribute.map((a) => ({
          ...a, ...(a.t && { t: T(a.t) }), ...(a.tensors && { tensors: a.tensors.map(T) }),
          ...(a.g && { g: G(a.g) }), ...(a.graphs && { graphs: a.graphs.map((x) => G(x)!) }),
        })) }),
      })),
    }),
  };
  return {
    ...m, graph: G(m.graph),
    ...(m.functions && { functions: m.functions.map((f) => ({ ...f, node: G({ node: f.node })!.node })) }),
    ...(m.trainingInfo && { trainingInfo: m.trainingInfo.map((t) => ({ ...t, initialization: G(t.initialization), algorithm: G(t.algorithm) })) }),
  };
}

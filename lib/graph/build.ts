// A small builder for graphs made in code (tests, the benchmark, exit-head grafting).
// It assembles a ModelProto and returns modelFromProto of it, so a built model is
// exactly what loading its encoded bytes would give.
import type { AttributeProto, ModelProto, NodeProto, TensorProto, ValueInfoProto } from '../onnx/types.js';
import { AttrType } from '../onnx/types.js';
import { FLOAT, INT64, INT32, DOUBLE, dtypeInfo, bytesFor } from '../onnx/dtype.js';
import { modelFromProto, typeToProto, type Dim, type Model } from './ir.js';
import { topoOrder } from './links.js';

export interface BuilderOptions {
  opset: number;
  name?: string;
  /** Seed of the pseudo-random initializers; each initializer also mixes in its own name. */
  seed?: number;
  /** What `init` without data holds: seeded random values (default) or zeros. */
  fill?: 'random' | 'zeros';
  irVersion?: number;
  producerName?: string;
}

/**
 * Initializer contents. 'random': uniform in ±1/sqrt(fan-in), fan-in = product of dims
 * after the first (LeCun-style scaling, common practice, so deep stacks stay finite).
 */
export type InitData =
  | Float32Array | Float64Array | Int32Array | BigInt64Array | Uint8Array | Int8Array
  | readonly number[] | readonly bigint[]
  | 'random' | 'zeros' | { uniform: [number, number] } | { fill: number };

class FloatAttr { constructor(readonly v: number) {} }
class FloatsAttr { constructor(readonly v: readonly number[]) {} }
class TensorAttr { constructor(readonly t: TensorProto) {} }
export type AttrValue = number | bigint | string | readonly number[] | readonly bigint[] | readonly string[] | Float32Array
  | FloatAttr | FloatsAttr | TensorAttr;

export interface NodeOptions { name?: string; domain?: string; outputs?: number | readonly string[] }

/** mulberry32: a tiny 32-bit PRNG (common practice), enough for deterministic weights. */
export function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** FNV-1a over a string, mixed with a seed: a per-initializer seed that does not shift when others are added. */
function hashSeed(seed: number, s: string): number {
  let h = (0x811c9dc5 ^ seed) >>> 0;
  for (let i = 0; i < s.length; i++) h = Math.imul(h ^ s.charCodeAt(i), 0x01000193) >>> 0;
  return h;
}

const asBytes = (a: ArrayBufferView) => new Uint8Array(a.buffer, a.byteOffset, a.byteLength);

/** Raw little-endian bytes of `count` elements of `dtype` (hosts are little-endian, as Node's are). */
function rawData(dtype: number, dims: readonly number[], data: InitData, seed: number, name: string): Uint8Array {
  const count = dims.reduce((a, b) => a * b, 1);
  const bytes = Number(bytesFor(dtype, BigInt(count)));
  if (data === 'zeros') return new Uint8Array(bytes);
  if (ArrayBuffer.isView(data)) {
    if (data.byteLength !== bytes) throw new Error(`init '${name}': ${data.byteLength} bytes given, ${bytes} expected for ${dtypeInfo(dtype).name}[${dims.join(',')}]`);
    return asBytes(data);
  }
  if (Array.isArray(data)) {
    if (data.length !== count) throw new Error(`init '${name}': ${data.length} values given, ${count} expected`);
    const xs = data as readonly (number | bigint)[];
    switch (dtype) {
      case FLOAT: return asBytes(Float32Array.from(xs, Number));
      case DOUBLE: return asBytes(Float64Array.from(xs, Number));
      case INT32: return asBytes(Int32Array.from(xs, Number));
      case INT64: return asBytes(BigInt64Array.from(xs, (x) => BigInt(x)));
      default: throw new Error(`init '${name}': a number list needs a typed array for ${dtypeInfo(dtype).name}`);
    }
  }
  if (dtype !== FLOAT) throw new Error(`init '${name}': generated values are float32 only`);
  const out = new Float32Array(count);
  if (typeof data === 'object' && 'fill' in data) return asBytes(out.fill(data.fill));
  const [lo, hi] = data === 'random'
    ? ((s) => [-s, s])(1 / Math.sqrt(Math.max(1, dims.slice(1).reduce((a, b) => a * b, 1))))
    : (data as { uniform: [number, number] }).uniform;
  const rnd = mulberry32(hashSeed(seed, name));
  for (let i = 0; i < count; i++) out[i] = lo + (hi - lo) * rnd();
  return asBytes(out);
}

function attrProto(name: string, v: AttrValue): AttributeProto {
  if (v instanceof FloatAttr) return { name, type: AttrType.FLOAT, f: v.v };
  if (v instanceof FloatsAttr) return { name, type: AttrType.FLOATS, floats: Float32Array.from(v.v) };
  if (v instanceof Float32Array) return { name, type: AttrType.FLOATS, floats: v };
  if (v instanceof TensorAttr) return { name, type: AttrType.TENSOR, t: v.t };
  if (typeof v === 'bigint') return { name, type: AttrType.INT, i: v };
  if (typeof v === 'number') return Number.isInteger(v) ? { name, type: AttrType.INT, i: BigInt(v) } : { name, type: AttrType.FLOAT, f: v };
  if (typeof v === 'string') return { name, type: AttrType.STRING, s: new TextEncoder().encode(v) };
  const xs = v as readonly (number | bigint | string)[];
  if (xs.length && xs.every((x) => typeof x === 'string'))
    return { name, type: AttrType.STRINGS, strings: (xs as string[]).map((x) => new TextEncoder().encode(x)) };
  if (!xs.every((x) => typeof x === 'bigint' || Number.isInteger(x)))
    throw new Error(`attribute '${name}': a list with non-integers must be wrapped in b.floats(...)`);
  return { name, type: AttrType.INTS, ints: BigInt64Array.from(xs as (number | bigint)[], (x) => BigInt(x)) };
}

const valueInfo = (name: string, dtype: number, shape?: readonly Dim[]): ValueInfoProto =>
  ({ name, type: typeToProto({ dtype, shape: shape && [...shape] }) });

export interface ModelBuilder {
  input(name: string, dtype: number, shape?: readonly Dim[]): string;
  init(name: string, dtype: number, dims: readonly number[], data?: InitData): string;
  node(op: string, inputs: readonly string[], attrs?: Record<string, AttrValue | undefined>, opts?: NodeOptions & { outputs?: 1 }): string;
  node(op: string, inputs: readonly string[], attrs: Record<string, AttrValue | undefined> | undefined, opts: NodeOptions & { outputs: number | readonly string[] }): string[];
  output(name: string, dtype?: number, shape?: readonly Dim[]): void;
  /** A tensor value for TENSOR attributes (Constant's value). */
  tensor(dtype: number, dims: readonly number[], data: InitData): TensorAttr;
  float(v: number): FloatAttr;
  floats(v: readonly number[]): FloatsAttr;
  /** Fresh name from a base, unique among all names so far. */
  fresh(base: string): string;
  /** Check the structure (every read provided, no cycle) unless `unchecked`, then assemble. */
  build(opts?: { unchecked?: boolean }): Model;
}

export function modelBuilder(o: BuilderOptions): ModelBuilder {
  const seed = o.seed ?? 1;
  const used = new Set<string>();
  const nodeNames = new Set<string>();
  const inputs: ValueInfoProto[] = [], outputs: ValueInfoProto[] = [], nodes: NodeProto[] = [], inits: TensorProto[] = [];
  const fresh = (base: string, taken = used): string => {
    let n = base, k = 1;
    while (taken.has(n) || !n) n = `${base}_${k++}`;
    taken.add(n);
    return n;
  };
  const tensor = (name: string | undefined, dtype: number, dims: readonly number[], data: InitData): TensorProto => {
    for (const d of dims) if (!Number.isSafeInteger(d) || d < 0) throw new Error(`tensor '${name ?? ''}': bad dim ${d}`);
    return {
      dims: BigInt64Array.from(dims, (d) => BigInt(d)), dataType: dtype, ...(name !== undefined && { name }),
      rawData: rawData(dtype, dims, data, seed, name ?? `const${nodes.length}`),
    };
  };
  const b: ModelBuilder = {
    fresh: (base) => fresh(base),
    input(name, dtype, shape) { const n = fresh(name); inputs.push(valueInfo(n, dtype, shape)); return n; },
    init(name, dtype, dims, data) { const n = fresh(name); inits.push(tensor(n, dtype, dims, data ?? o.fill ?? 'random')); return n; },
    node(op: string, ins: readonly string[], attrs: Record<string, AttrValue | undefined> = {}, opts: NodeOptions = {}): any {
      const name = fresh(opts.name ?? `${op.toLowerCase()}_${nodes.length}`, nodeNames);
      const outs = typeof opts.outputs === 'object'
        ? opts.outputs.map((x) => fresh(x))
        : Array.from({ length: opts.outputs ?? 1 }, (_, i) => fresh(i ? `${name}_out${i}` : `${name}_out`));
      const attribute = Object.entries(attrs).filter(([, v]) => v !== undefined).map(([k, v]) => attrProto(k, v!));
      nodes.push({
        input: [...ins], output: outs, name, opType: op,
        ...(opts.domain && { domain: opts.domain }), ...(attribute.length && { attribute }),
      });
      return opts.outputs === undefined || opts.outputs === 1 ? outs[0] : outs;
    },
    output(name, dtype = FLOAT, shape) { outputs.push(valueInfo(name, dtype, shape)); },
    tensor: (dtype, dims, data) => new TensorAttr(tensor(undefined, dtype, dims, data)),
    float: (v) => new FloatAttr(v),
    floats: (v) => new FloatsAttr(v),
    build(bo = {}) {
      const domains = new Map<string, number>([['', o.opset]]);
      for (const n of nodes) if (n.domain && !domains.has(n.domain)) domains.set(n.domain, 1);
      const proto: ModelProto = {
        irVersion: BigInt(o.irVersion ?? 8),
        opsetImport: [...domains].map(([domain, v]) => ({ ...(domain && { domain }), version: BigInt(v) })),
        producerName: o.producerName ?? 'offramp',
        graph: { node: [...nodes], name: o.name ?? 'graph', initializer: [...inits], input: [...inputs], output: [...outputs] },
      };
      const m = modelFromProto(proto);
      if (!bo.unchecked) topoOrder(m.graph);
      return m;
    },
  };
  return b;
}

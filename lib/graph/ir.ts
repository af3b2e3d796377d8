// The graph IR: plain data. Nodes name their values; links (producer/consumers)
// are derived by `linkGraph`. Every IR object keeps the proto it came from, so
// fields the IR does not model survive a load/save cycle.
import type { AttributeProto, GraphProto, ModelProto, NodeProto, TensorProto, TypeProto, ValueInfoProto } from '../onnx/types.js';

/** A dimension: a number, or a symbol still to bind. */
export type Dim = number | string;
export interface TensorType { dtype: number; /** undefined: rank unknown */ shape?: Dim[] }

export interface ValueInfo { name: string; type?: TensorType; proto: ValueInfoProto }

export interface Node {
  name: string;
  op: string;
  domain: string;
  /** '' marks an omitted optional input. */
  inputs: string[];
  outputs: string[];
  attrs: Map<string, AttributeProto>;
  /** Bodies of If/Loop/Scan (and any graph attribute), by attribute name. */
  bodies: Map<string, Graph[]>;
  /** Outer-scope names read inside the bodies: implicit inputs of this node. */
  captures: string[];
  proto: NodeProto;
}

export interface Graph {
  name: string;
  nodes: Node[];
  inputs: ValueInfo[];
  outputs: ValueInfo[];
  initializers: Map<string, TensorProto>;
  valueInfo: Map<string, ValueInfo>;
  proto: GraphProto;
}

export interface Model {
  irVersion: bigint;
  /** domain ('' for ai.onnx) → opset version */
  opsets: Map<string, number>;
  graph: Graph;
  proto: ModelProto;
}

const normDomain = (d: string | undefined) => (d === 'ai.onnx' ? '' : d ?? '');

export function typeFromProto(t: TypeProto | undefined): TensorType | undefined {
  const tt = t?.tensorType;
  if (!tt) return undefined;
  const dims = tt.shape?.dim;
  return {
    dtype: tt.elemType ?? 0,
    shape: tt.shape === undefined ? undefined : (dims ?? []).map((d, i) =>
      d.dimValue !== undefined ? Number(d.dimValue) : d.dimParam ? d.dimParam : `?${i}`),
  };
}

export function typeToProto(t: TensorType): TypeProto {
  return {
    tensorType: {
      elemType: t.dtype,
      ...(t.shape && {
        shape: { dim: t.shape.map((d) => (typeof d === 'number' ? { dimValue: BigInt(d) } : d.startsWith('?') ? {} : { dimParam: d })) },
      }),
    },
  };
}

const readTypes = new WeakMap<TensorType, TypeProto | undefined>();
function valueInfoFromProto(v: ValueInfoProto): ValueInfo {
  const type = typeFromProto(v.type);
  if (type) readTypes.set(type, v.type);
  return { name: v.name ?? '', type, proto: v };
}

export function graphFromProto(g: GraphProto): Graph {
  return {
    name: g.name ?? '',
    nodes: (g.node ?? []).map(nodeFromProto),
    inputs: (g.input ?? []).map(valueInfoFromProto),
    outputs: (g.output ?? []).map(valueInfoFromProto),
    initializers: new Map((g.initializer ?? []).map((t) => [t.name ?? '', t])),
    valueInfo: new Map((g.valueInfo ?? []).map((v) => [v.name ?? '', valueInfoFromProto(v)])),
    proto: g,
  };
}

export function nodeFromProto(n: NodeProto): Node {
  const attrs = new Map((n.attribute ?? []).map((a) => [a.name ?? '', a]));
  const bodies = new Map<string, Graph[]>();
  for (const [k, a] of attrs) {
    if (a.g) bodies.set(k, [graphFromProto(a.g)]);
    else if (a.graphs?.length) bodies.set(k, a.graphs.map(graphFromProto));
  }
  const node: Node = {
    name: n.name ?? '', op: n.opType ?? '', domain: normDomain(n.domain), inputs: n.input ?? [], outputs: n.output ?? [],
    attrs, bodies, captures: [], proto: n,
  };
  node.captures = [...new Set([...bodies.values()].flat().flatMap(outerNames))];
  return node;
}

/** Names a graph reads that it does not define itself: its outer-scope references. */
export function outerNames(g: Graph): string[] {
  const defined = new Set<string>([...g.inputs.map((v) => v.name), ...g.initializers.keys()]);
  const used: string[] = [];
  for (const n of g.nodes) {
    for (const i of [...n.inputs, ...n.captures]) if (i && !defined.has(i)) used.push(i);
    for (const o of n.outputs) defined.add(o);
  }
  return [...new Set(used)];
}

export function modelFromProto(m: ModelProto): Model {
  if (!m.graph) throw new Error('model has no graph');
  const opsets = new Map<string, number>();
  for (const o of m.opsetImport ?? []) opsets.set(normDomain(o.domain), Number(o.version ?? 0n));
  return { irVersion: m.irVersion ?? 0n, opsets, graph: graphFromProto(m.graph), proto: m };
}

export function nodeToProto(n: Node): NodeProto {
  const attribute = [...n.attrs.values()].map((a) => {
    const b = n.bodies.get(a.name ?? '');
    if (!b) return a;
    return a.g ? { ...a, g: graphToProto(b[0]) } : { ...a, graphs: b.map(graphToProto) };
  });
  const p: NodeProto = { ...n.proto, input: n.inputs, output: n.outputs, opType: n.op, attribute };
  if (n.name || n.proto.name !== undefined) p.name = n.name;
  if (n.domain || n.proto.domain !== undefined) p.domain = n.proto.domain === 'ai.onnx' && !n.domain ? 'ai.onnx' : n.domain;
  if (!attribute.length && !n.proto.attribute) delete p.attribute;
  return p;
}

export function valueInfoToProto(v: ValueInfo): ValueInfoProto {
  const p: ValueInfoProto = { ...v.proto, name: v.name };
  // A type left as it was read is written back as the original proto (keeps denotations, symbols).
  // A type made in code (not in readTypes) is always written, even when the proto has none.
  if (v.type && (!readTypes.has(v.type) || readTypes.get(v.type) !== v.proto.type)) p.type = typeToProto(v.type);
  return p;
}

export function graphToProto(g: Graph): GraphProto {
  const p: GraphProto = { ...g.proto, node: g.nodes.map(nodeToProto), input: g.inputs.map(valueInfoToProto), output: g.outputs.map(valueInfoToProto) };
  if (g.name || g.proto.name !== undefined) p.name = g.name;
  p.initializer = [...g.initializers.values()];
  p.valueInfo = [...g.valueInfo.values()].map(valueInfoToProto);
  for (const k of ['node', 'input', 'output', 'initializer', 'valueInfo'] as const) {
    if (!(p[k] as unknown[]).length && g.proto[k] === undefined) delete p[k];
  }
  return p;
}

export function modelToProto(m: Model): ModelProto {
  const opsetImport = [...m.opsets].map(([domain, v]) => {
    const orig = m.proto.opsetImport?.find((o) => normDomain(o.domain) === domain);
    return { ...orig, ...(orig?.domain !== undefined || domain ? { domain: orig?.domain ?? domain } : {}), version: BigInt(v) };
  });
  return { ...m.proto, irVersion: m.irVersion, opsetImport, graph: graphToProto(m.graph) };
}

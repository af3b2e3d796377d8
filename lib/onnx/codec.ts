// Table-driven protobuf codec over SCHEMA. Decoding keeps unknown fields as raw
// bytes and bytes fields as views; encoding sizes the whole message first and
// writes it into one buffer, so large raw_data is copied exactly once.
import { SCHEMA, type Field, type Scalar } from './schema.js';
import { Reader, Writer, Wire, WireError, varintSize } from './wire.js';
import type { ModelProto, TensorProto } from './types.js';

export class CodecError extends Error {
  constructor(message: string, readonly path: string, readonly offset?: number) {
    super(offset === undefined ? `${message} (at ${path})` : `${message} (at ${path}, byte ${offset})`);
  }
}

type Msg = Record<string, unknown> & { $unknown?: Uint8Array[] };
interface Compiled { byNo: Map<number, Field>; fields: Field[] }
const compiled = new Map<string, Compiled>();
function table(name: string): Compiled {
  let c = compiled.get(name);
  if (!c) {
    const fields = SCHEMA[name];
    if (!fields) throw new Error(`no schema for ${name}`);
    // Field-number order is how the reference protobuf writers emit, so unchanged files re-encode byte for byte.
    c = { fields: [...fields].sort((a, b) => a.no - b.no), byNo: new Map(fields.map((x) => [x.no, x])) };
    compiled.set(name, c);
  }
  return c;
}

const utf8 = new TextDecoder('utf-8', { fatal: true });
const utf8enc = new TextEncoder();
const fixedWidth: Partial<Record<Scalar, number>> = { float: 4, double: 8 };
const wireOf = (t: Field['type']): Wire =>
  t === 'float' ? Wire.I32 : t === 'double' ? Wire.I64 : t === 'string' || t === 'bytes' || t.startsWith('msg:') ? Wire.Len : Wire.Varint;

function readScalar(r: Reader, t: Scalar): unknown {
  switch (t) {
    case 'string': return utf8.decode(r.bytes());
    case 'bytes': return r.bytes();
    case 'int64': return r.int64();
    case 'uint64': return r.uint64();
    case 'int32': return r.int32();
    case 'float': return r.float();
    case 'double': return r.double();
  }
}

function toTyped(t: Scalar, xs: unknown[]): unknown {
  switch (t) {
    case 'float': return Float32Array.from(xs as number[]);
    case 'double': return Float64Array.from(xs as number[]);
    case 'int32': return Int32Array.from(xs as number[]);
    case 'int64': return BigInt64Array.from(xs as bigint[]);
    case 'uint64': return BigUint64Array.from(xs as bigint[]);
    default: return xs;
  }
}

/** Nesting limit; protobuf's own readers default to 100 too (common practice). */
export const MAX_DEPTH = 100;

function decodeMsg(r: Reader, end: number, type: string, path: string, depth = 0): Msg {
  if (depth > MAX_DEPTH) throw new CodecError(`messages nested more than ${MAX_DEPTH} deep`, `…${path.slice(-120)}`, r.pos);
  const { byNo } = table(type);
  const out: Msg = {};
  const lists = new Map<Field, unknown[]>();
  while (r.pos < end) {
    const tagStart = r.pos;
    const tag = r.varint();
    const no = Math.floor(tag / 8), wire = tag & 7;
    if (no === 0) throw new CodecError('field number 0', path, tagStart);
    const fd = byNo.get(no);
    const expected = fd ? wireOf(fd.type) : -1;
    if (!fd || (wire !== expected && !(fd.repeated && wire === Wire.Len && expected !== Wire.Len))) {
      // Unknown field, or a known number with a wire type we cannot read: keep it verbatim.
      r.skip(wire);
      if (r.pos > end) throw new CodecError('field runs past its message', path, tagStart);
      (out.$unknown ??= []).push(r.buf.subarray(tagStart, r.pos));
      continue;
    }
    const sub = `${path}.${fd.name}`;
    let list = fd.repeated ? lists.get(fd) : undefined;
    if (fd.repeated && !list) { list = []; lists.set(fd, list); }
    if (fd.type.startsWith('msg:')) {
      const n = r.varint();
      const stop = r.pos + n;
      if (stop > end) throw new CodecError('message runs past its parent', sub, r.pos);
      const m = decodeMsg(r, stop, fd.type.slice(4), list ? `${sub}[${list.length}]` : sub, depth + 1);
      if (list) list.push(m); else out[fd.name] = m;
      continue;
    }
    const t = fd.type as Scalar;
    if (list && wire === Wire.Len && expected !== Wire.Len) {
      const n = r.varint();
      const stop = r.pos + n;
      if (stop > end) throw new CodecError('packed field runs past its message', sub, r.pos);
      const w = fixedWidth[t];
      if (w && n % w !== 0) throw new CodecError(`packed ${t} length ${n} is not a multiple of ${w}`, sub, r.pos);
      while (r.pos < stop) list.push(readScalar(r, t));
      if (r.pos !== stop) throw new CodecError('packed field overran', sub, r.pos);
      continue;
    }
    const v = readScalar(r, t);
    if (r.pos > end) throw new CodecError('field runs past its message', sub, tagStart);
    if (list) list.push(v); else out[fd.name] = v;
  }
  if (r.pos !== end) throw new CodecError('message overran its length', path, r.pos);
  for (const [fd, xs] of lists) out[fd.name] = fd.type.startsWith('msg:') ? xs : toTyped(fd.type as Scalar, xs);
  return out;
}

export function decodeMessage<T>(buf: Uint8Array, type: string, path = type): T {
  try {
    return decodeMsg(new Reader(buf), buf.length, type, path) as T;
  } catch (e) {
    if (e instanceof WireError) throw new CodecError(e.message, path, e.offset);
    if (e instanceof TypeError && /encoded data/.test(e.message)) throw new CodecError('a string field is not valid UTF-8', path);
    throw e;
  }
}

export const decodeModel = (buf: Uint8Array): ModelProto => decodeMessage<ModelProto>(buf, 'ModelProto');
export const decodeTensor = (buf: Uint8Array): TensorProto => decodeMessage<TensorProto>(buf, 'TensorProto');

// ---- encoding ----

function scalarSize(t: Scalar, v: unknown): number {
  switch (t) {
    case 'string': { const n = utf8enc.encode(v as string).length; return varintSize(n) + n; }
    case 'bytes': { const n = (v as Uint8Array).length; return varintSize(n) + n; }
    case 'float': return 4;
    case 'double': return 8;
    default: return varintSize(v as number | bigint);
  }
}

function packedLen(t: Scalar, xs: ArrayLike<unknown>): number {
  const w = fixedWidth[t];
  if (w) return w * xs.length;
  let n = 0;
  for (let i = 0; i < xs.length; i++) n += scalarSize(t, xs[i]);
  return n;
}

/** Sizes of every nested message, in the order the writer meets them. */
function sizeMsg(m: Msg, type: string, sizes: number[]): number {
  const idx = sizes.length;
  sizes.push(0);
  let total = 0;
  for (const fd of table(type).fields) {
    const v = m[fd.name];
    if (v === undefined) continue;
    const tagLen = varintSize(fd.no * 8);
    if (fd.type.startsWith('msg:')) {
      const sub = fd.type.slice(4);
      for (const x of (fd.repeated ? (v as Msg[]) : [v as Msg])) {
        const n = sizeMsg(x, sub, sizes);
        total += tagLen + varintSize(n) + n;
      }
      continue;
    }
    const t = fd.type as Scalar;
    if (!fd.repeated) { total += tagLen + scalarSize(t, v); continue; }
    const xs = v as ArrayLike<unknown>;
    if (xs.length === 0) continue;
    if (fd.packed) {
      const n = packedLen(t, xs);
      total += tagLen + varintSize(n) + n;
    } else {
      for (let i = 0; i < xs.length; i++) total += tagLen + scalarSize(t, xs[i]);
    }
  }
  for (const u of m.$unknown ?? []) total += u.length;
  sizes[idx] = total;
  return total;
}

function writeScalar(w: Writer, t: Scalar, v: unknown): void {
  switch (t) {
    case 'string': { const b = utf8enc.encode(v as string); w.varint(b.length); w.raw(b); return; }
    case 'bytes': { const b = v as Uint8Array; w.varint(b.length); w.raw(b); return; }
    case 'float': w.float(v as number); return;
    case 'double': w.double(v as number); return;
    default: w.varint(v as number | bigint);
  }
}

function writeMsg(w: Writer, m: Msg, type: string, sizes: number[], cursor: { i: number }): void {
  cursor.i++;
  for (const fd of table(type).fields) {
    const v = m[fd.name];
    if (v === undefined) continue;
    if (fd.type.startsWith('msg:')) {
      const sub = fd.type.slice(4);
      for (const x of (fd.repeated ? (v as Msg[]) : [v as Msg])) {
        w.tag(fd.no, Wire.Len);
        w.varint(sizes[cursor.i]);
        writeMsg(w, x, sub, sizes, cursor);
      }
      continue;
    }
    const t = fd.type as Scalar;
    if (!fd.repeated) { w.tag(fd.no, wireOf(t)); writeScalar(w, t, v); continue; }
    const xs = v as ArrayLike<unknown>;
    if (xs.length === 0) continue;
    if (fd.packed) {
      const n = packedLen(t, xs);
      w.tag(fd.no, Wire.Len);
      w.varint(n);
      for (let i = 0; i < xs.length; i++) writeScalar(w, t, xs[i]);
    } else {
      for (let i = 0; i < xs.length; i++) { w.tag(fd.no, wireOf(t)); writeScalar(w, t, xs[i]); }
    }
  }
  for (const u of m.$unknown ?? []) w.raw(u);
}

/** Largest message protobuf readers accept (2 GiB - 1). */
export const PROTO_LIMIT = 2 ** 31 - 1;

export function encodeMessage(m: object, type: string): Uint8Array {
  const sizes: number[] = [];
  const n = sizeMsg(m as Msg, type, sizes);
  if (n > PROTO_LIMIT) throw new CodecError(`encoded ${type} would be ${n} bytes, over the protobuf limit of 2 GiB; store initializers as external data`, type);
  const buf = Buffer.allocUnsafe(n);
  const w = new Writer(buf);
  writeMsg(w, m as Msg, type, sizes, { i: 0 });
  if (w.pos !== n) throw new Error(`internal: encoded ${w.pos} bytes, sized ${n}`);
  return buf;
}

export const encodeModel = (m: ModelProto): Uint8Array => encodeMessage(m, 'ModelProto');

/** Names of unknown fields anywhere in a message tree, as paths, for reports. */
export function unknownFieldPaths(m: object, type: string, path = type, out: string[] = []): string[] {
  const msg = m as Msg;
  for (const u of msg.$unknown ?? []) out.push(`${path}#${new Reader(u).varint() >>> 3}`);
  for (const fd of table(type).fields) {
    if (!fd.type.startsWith('msg:')) continue;
    const v = msg[fd.name];
    if (v === undefined) continue;
    const xs = fd.repeated ? (v as Msg[]) : [v as Msg];
    xs.forEach((x, i) => unknownFieldPaths(x, fd.type.slice(4), fd.repeated ? `${path}.${fd.name}[${i}]` : `${path}.${fd.name}`, out));
  }
  return out;
}

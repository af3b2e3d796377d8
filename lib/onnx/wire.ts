// Protocol-buffer wire format, read and written by hand so that int64 stays exact
// (bigint), bytes stay views into the source buffer, and fields we do not know
// are kept verbatim instead of being dropped.

export const enum Wire { Varint = 0, I64 = 1, Len = 2, I32 = 5 }

export class WireError extends Error {
  constructor(message: string, readonly offset: number) { super(message); }
}

const TWO32 = 4294967296;

export class Reader {
  pos: number;
  private readonly view: DataView;
  constructor(readonly buf: Uint8Array, start = 0, readonly end = buf.length) {
    this.pos = start;
    this.view = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
  }

  /** Varint as a number; exact up to 2^53, else throws (callers use varintBig for int64). */
  varint(): number {
    const b = this.buf;
    let lo = 0, shift = 0, byte = 0;
    do {
      if (this.pos >= this.end) throw new WireError('truncated varint', this.pos);
      byte = b[this.pos++];
      if (shift < 28) lo |= (byte & 0x7f) << shift;
      else return this.varintSlow(lo >>> 0, byte, shift);
      shift += 7;
    } while (byte & 0x80);
    return lo >>> 0;
  }

  private varintSlow(lo: number, byte: number, shift: number): number {
    let v = BigInt(lo) + (BigInt(byte & 0x7f) << BigInt(shift));
    while (byte & 0x80) {
      if (this.pos >= this.end) throw new WireError('truncated varint', this.pos);
      byte = this.buf[this.pos++];
      shift += 7;
      if (shift > 63) throw new WireError('varint longer than 10 bytes', this.pos);
      v += BigInt(byte & 0x7f) << BigInt(shift);
    }
    v = BigInt.asUintN(64, v);
    if (v > BigInt(Number.MAX_SAFE_INTEGER)) throw new WireError('varint too large for a length or tag', this.pos);
    return Number(v);
  }

  /** Varint as an unsigned 64-bit bigint. */
  varintBig(): bigint {
    const start = this.pos;
    let v = 0n, shift = 0n, byte = 0;
    do {
      if (this.pos >= this.end) throw new WireError('truncated varint', start);
      byte = this.buf[this.pos++];
      if (shift === 63n && (byte & 0x7e)) throw new WireError('varint longer than 64 bits', start);
      if (shift > 63n) throw new WireError('varint longer than 10 bytes', start);
      v |= BigInt(byte & 0x7f) << shift;
      shift += 7n;
    } while (byte & 0x80);
    return v;
  }

  int64(): bigint { return BigInt.asIntN(64, this.varintBig()); }
  uint64(): bigint { return this.varintBig(); }
  int32(): number { return Number(BigInt.asIntN(32, this.varintBig())); }

  float(): number { this.need(4); const v = this.view.getFloat32(this.pos, true); this.pos += 4; return v; }
  double(): number { this.need(8); const v = this.view.getFloat64(this.pos, true); this.pos += 8; return v; }

  /** A zero-copy view of the next length-delimited field. */
  bytes(): Uint8Array {
    const n = this.varint();
    this.need(n);
    const v = this.buf.subarray(this.pos, this.pos + n);
    this.pos += n;
    return v;
  }

  need(n: number): void {
    if (this.pos + n > this.end) throw new WireError(`field of ${n} bytes runs past the end`, this.pos);
  }

  skip(wire: number): void {
    switch (wire) {
      case Wire.Varint: this.varintBig(); return;
      case Wire.I64: this.need(8); this.pos += 8; return;
      case Wire.Len: { const n = this.varint(); this.need(n); this.pos += n; return; }
      case Wire.I32: this.need(4); this.pos += 4; return;
      default: throw new WireError(`unsupported wire type ${wire}`, this.pos);
    }
  }
}

/** Byte length of a varint. */
export function varintSize(v: number | bigint): number {
  if (typeof v === 'number' && v >= 0 && v < TWO32) {
    return v < 0x80 ? 1 : v < 0x4000 ? 2 : v < 0x200000 ? 3 : v < 0x10000000 ? 4 : 5;
  }
  let b = BigInt.asUintN(64, BigInt(v)), n = 1;
  while (b >= 0x80n) { b >>= 7n; n++; }
  return n;
}

export class Writer {
  pos = 0;
  readonly view: DataView;
  constructor(readonly buf: Uint8Array) {
    this.view = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
  }
  varint(v: number | bigint): void {
    if (typeof v === 'number' && v >= 0 && v < TWO32) {
      while (v >= 0x80) { this.buf[this.pos++] = (v & 0x7f) | 0x80; v >>>= 7; }
      this.buf[this.pos++] = v;
      return;
    }
    let b = BigInt.asUintN(64, BigInt(v));
    while (b >= 0x80n) { this.buf[this.pos++] = Number(b & 0x7fn) | 0x80; b >>= 7n; }
    this.buf[this.pos++] = Number(b);
  }
  tag(no: number, wire: number): void { this.varint(no * 8 + wire); }
  float(v: number): void { this.view.setFloat32(this.pos, v, true); this.pos += 4; }
  double(v: number): void { this.view.setFloat64(this.pos, v, true); this.pos += 8; }
  raw(b: Uint8Array): void { this.buf.set(b, this.pos); this.pos += b.length; }
}

// Attribute access with ONNX defaults; int64 attributes saturate to safe integers.
import type { AttributeProto } from '../onnx/types.js';
import type { Attrs, Const } from './rule.js';
import { constFromTensor } from './rule.js';

const sat = (b: bigint) => (b > BigInt(Number.MAX_SAFE_INTEGER) ? Number.MAX_SAFE_INTEGER : b < -BigInt(Number.MAX_SAFE_INTEGER) ? -Number.MAX_SAFE_INTEGER : Number(b));
const dec = new TextDecoder();

export function attrsOf(map: Map<string, AttributeProto>): Attrs {
  const a = (n: string) => map.get(n);
  return {
    has: (n) => map.has(n),
    int: ((n: string, d?: number) => { const x = a(n)?.i; return x === undefined ? d : sat(x); }) as Attrs['int'],
    ints: ((n: string, d?: number[]) => { const x = a(n); return x ? Array.from(x.ints ?? [], sat) : d; }) as Attrs['ints'],
    float: (n, d) => a(n)?.f ?? d,
    floats: (n) => { const x = a(n)?.floats; return x && Array.from(x); },
    str: ((n: string, d?: string) => { const x = a(n)?.s; return x === undefined ? d : dec.decode(x); }) as Attrs['str'],
    tensor: (n): Const | undefined => { const t = a(n)?.t; return t && constFromTensor(t); },
    raw: a,
  };
}

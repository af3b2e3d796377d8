// ONNX element types (TensorProto.DataType) with their storage widths.
export interface DTypeInfo { id: number; name: string; bits: number; ort?: string; integer: boolean }

const T = (id: number, name: string, bits: number, integer: boolean, ort?: string): DTypeInfo => ({ id, name, bits, integer, ort });
export const DTYPES: DTypeInfo[] = [
  T(1, 'float32', 32, false, 'float32'), T(2, 'uint8', 8, true, 'uint8'), T(3, 'int8', 8, true, 'int8'),
  T(4, 'uint16', 16, true, 'uint16'), T(5, 'int16', 16, true, 'int16'), T(6, 'int32', 32, true, 'int32'),
  T(7, 'int64', 64, true, 'int64'), T(8, 'string', 0, false, 'string'), T(9, 'bool', 8, true, 'bool'),
  T(10, 'float16', 16, false, 'float16'), T(11, 'float64', 64, false, 'float64'), T(12, 'uint32', 32, true, 'uint32'),
  T(13, 'uint64', 64, true, 'uint64'), T(14, 'complex64', 64, false), T(15, 'complex128', 128, false),
  T(16, 'bfloat16', 16, false), T(17, 'float8e4m3fn', 8, false), T(18, 'float8e4m3fnuz', 8, false),
  T(19, 'float8e5m2', 8, false), T(20, 'float8e5m2fnuz', 8, false), T(21, 'uint4', 4, true), T(22, 'int4', 4, true),
  T(23, 'float4e2m1', 4, false), T(24, 'float8e8m0', 8, false),
];
const byId = new Map(DTYPES.map((d) => [d.id, d]));
const byName = new Map(DTYPES.map((d) => [d.name, d]));

export const FLOAT = 1, UINT8 = 2, INT8 = 3, INT32 = 6, INT64 = 7, BOOL = 9, FLOAT16 = 10, DOUBLE = 11;

export function dtypeInfo(id: number): DTypeInfo {
  const d = byId.get(id);
  if (!d) throw new Error(`unknown ONNX element type ${id}`);
  return d;
}
export const dtypeName = (id: number): string => byId.get(id)?.name ?? `type${id}`;
export const dtypeByName = (name: string): DTypeInfo | undefined => byName.get(name);

/** Bytes for `count` elements; sub-byte types pack, rounded up to whole bytes. */
export function bytesFor(id: number, count: bigint): bigint {
  const bits = BigInt(dtypeInfo(id).bits);
  return (count * bits + 7n) / 8n;
}

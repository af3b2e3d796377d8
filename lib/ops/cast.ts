// Cast and CastLike fold with the value converted as the target type stores it
// (integers truncate and wrap, float32 rounds, bool is nonzero), so a shape that
// passes through Cast(float)→Floor→Cast(int64) still folds to the same numbers.
import type { Const, OpRule, InferCtx, Known } from './rule.js';
import { known } from './rule.js';
import { DTYPES, dtypeInfo, BOOL, FLOAT, FLOAT16 } from '../onnx/dtype.js';

const BFLOAT16 = 16;

// Cast-1 names the type as a string ("FLOAT", "INT64", ...).
const byProtoName = new Map(DTYPES.map((d) => [d.name === 'float32' ? 'FLOAT' : d.name === 'float64' ? 'DOUBLE' : d.name === 'float16' ? 'FLOAT16' : d.name.toUpperCase(), d.id]));

const roundEven = (x: number) => { const r = Math.round(x); return Math.abs(x % 1) === 0.5 && r % 2 ? r - 1 : r; };

/** Round to a binary float with `mant` fraction bits and minimum normal exponent `emin`. */
function roundFloat(v: number, mant: number, emin: number, max: number): number {
  if (!Number.isFinite(v) || v === 0) return v;
  const a = Math.abs(v);
  let e = Math.max(Math.floor(Math.log2(a)), emin);
  if (e > emin && 2 ** e > a) e--;
  else if (2 ** (e + 1) <= a) e++;
  const q = 2 ** (e - mant);
  const r = roundEven(a / q) * q;
  return Math.sign(v) * (r > max ? Infinity : r);
}

export function castNumber(v: number, to: number): number {
  if (to === BOOL) return v !== 0 ? 1 : 0;
  if (to === FLOAT) return Math.fround(v);
  if (to === FLOAT16) return roundFloat(v, 10, -14, 65504);
  if (to === BFLOAT16) return roundFloat(Math.fround(v), 7, -126, 3.3895313892515355e38);
  const t = dtypeInfo(to);
  if (!t.integer) return v;
  if (!Number.isFinite(v)) return v;
  const x = Math.trunc(v);
  if (t.bits >= 64) return x;
  const m = 2 ** t.bits;
  const u = ((x % m) + m) % m;
  const signed = [3, 5, 6, 22].includes(to);
  return signed && u >= m / 2 ? u - m : u;
}

const castConst = (v: Const | undefined, to: number): Const | undefined =>
  v && to !== 8 && v.dtype !== 8 ? { dtype: to, dims: v.dims, data: v.data.map((x) => castNumber(x, to)) } : undefined;

function castTo(c: InferCtx, to: number | undefined): (Known | undefined)[] {
  const x = c.inputs[0];
  if (!x || to === undefined) return [];
  return [known(to, x.type.shape, castConst(x.value, to))];
}

const cast: OpRule = {
  op: 'Cast',
  infer: (c) => {
    const s = c.raw('to')?.s;
    return castTo(c, s ? byProtoName.get(new TextDecoder().decode(s).toUpperCase()) : c.int('to'));
  },
};
const castLike: OpRule = { op: 'CastLike', since: 15, infer: (c) => castTo(c, c.inputs[1]?.type.dtype) };

export const rules: OpRule[] = [cast, castLike];

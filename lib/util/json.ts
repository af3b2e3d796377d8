// JSON for scripts: counts are exact.

/** JSON with bigints as numbers where exact, else as decimal strings. */
export function toJson(v: unknown, indent = 2): string {
  return JSON.stringify(v, (_k, x) => (typeof x === 'bigint' ? (x <= BigInt(Number.MAX_SAFE_INTEGER) && x >= -BigInt(Number.MAX_SAFE_INTEGER) ? Number(x) : x.toString()) : x), indent);
}

// JSON for scripts: counts are exact.

/** JSON with bigints as numbers where exact, else as decimal strings. */
export function toJson(v: unknown, indent = 2): string {
  return JSON.stringify(v, (_k, x) => (typeof x === 'bigint' ? (x <= BigInt(Number.MAX_SAFE_INTEGER) && x >= -BigInt(Number.MAX_SAFE_INTEGER) ? Number(x) : x.toString()) : x), indent);
}

/**
 * JSON.parse for a user's file or option, failing with a message that never quotes the input back:
 * a binary file given by mistake would print its raw bytes.
 */
export function parseJsonText(text: string, what: string): { ok: true; value: unknown } | { ok: false; message: string } {
  try { return { ok: true, value: JSON.parse(text) }; } catch (e) {
    const at = /position (\d+)/.exec((e as Error).message)?.[1];
    // eslint-disable-next-line no-control-regex
    const binary = /[\u0000-\u0008\u000e-\u001f\ufffd]/.test(text.slice(0, 4096));
    return { ok: false, message: `not valid JSON${at ? ` (at byte ${at})` : ''}${binary ? ', it looks like binary data' : ''}: expected ${what}` };
  }
}

/**
 * A figure derived from counts (a share, or points made from shares) without binary floating-point noise:
 * 0.15999999999999348 → 0.16. Twelve significant digits keep every figure a count of up to 10^9 rows can give.
 */
export const roundNoise = (x: number) => (Number.isFinite(x) && x !== 0 ? Number(x.toPrecision(12)) : x);

// Fixed-sequence testing, the family-wise error control of Learn-then-Test
// (Angelopoulos, Bates, Candès, Jordan & Lei 2021): hypotheses ordered in
// advance (from the search part only, never the certification part), each
// tested at the full level δ, stopping at the first that fails. The chance that
// any wrongly certified setting is among those passed is at most δ.

export interface Sequence<T> {
  /** the passed prefix, in order; the last is the boldest certified setting */
  passed: T[];
  /** the first setting that failed, when one did */
  failed?: T;
}

export function fixedSequence<T>(ordered: readonly T[], passes: (t: T) => boolean): Sequence<T> {
  const passed: T[] = [];
  for (const t of ordered) {
    if (!passes(t)) return { passed, failed: t };
    passed.push(t);
  }
  return { passed };
}

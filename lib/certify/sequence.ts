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

export interface Chains<T> {
  /** every setting that passed, in the order they passed */
  passed: T[];
  /** per chain: the setting it stopped at, when it did not run to its end */
  failed: (T | undefined)[];
}

/**
 * Several fixed sequences at once, δ split among them (evenly, or by `weights` adding up to at most 1); a chain that runs to its end hands its level on to
 * the chains still going, which test their current setting again at the higher level (a graphical procedure of
 * chains: Bretz, Maurer, Brannath & Posch 2009). A setting may stand in several chains; once passed it is passed
 * in all of them. The family-wise error stays at most δ by the sequential rejection principle (Goeman & Solari
 * 2010): levels only grow as settings pass, and with every false null passed, the levels held by the true ones
 * (one current setting per chain) add up to at most δ. `passesAt(t, level)` must be a valid level-`level` test,
 * passing more often at higher levels.
 */
export function chainedSequences<T>(chains: readonly (readonly T[])[], delta: number, passesAt: (t: T, level: number) => boolean, weights?: readonly number[]): Chains<T> {
  const K = chains.length, pos = new Array<number>(K).fill(0);
  const w = weights ?? chains.map(() => 1 / K), sum = w.reduce((a, b) => a + b, 0);
  if (w.length !== K || w.some((x) => !(x >= 0)) || sum > 1 + 1e-12) throw new RangeError('chain weights: one per chain, each ≥ 0, adding up to at most 1');
  const level = w.map((x) => x * delta);
  const passed: T[] = [], done = new Set<T>(), tried = new Map<T, number>();
  const skip = (k: number) => { while (pos[k] < chains[k].length && done.has(chains[k][pos[k]])) pos[k]++; };
  // a chain that ran to its end gives its level, evenly, to the chains still going
  const handOn = () => {
    const open = chains.map((_, k) => k).filter((k) => pos[k] < chains[k].length);
    for (let k = 0; k < K; k++) if (pos[k] >= chains[k].length && level[k] > 0 && open.length) { for (const j of open) level[j] += level[k] / open.length; level[k] = 0; }
  };
  for (let moved = true; moved;) {
    moved = false;
    for (let k = 0; k < K; k++) {
      skip(k); handOn();
      while (pos[k] < chains[k].length) {
        const t = chains[k][pos[k]];
        // the level a setting gets is the sum over the chains it heads now
        let at = 0;
        for (let j = 0; j < K; j++) { skip(j); if (pos[j] < chains[j].length && chains[j][pos[j]] === t) at += level[j]; }
        // a setting already refused at this level (or a higher one) is refused again without recomputing
        if ((tried.get(t) ?? -1) >= at || !passesAt(t, at)) { tried.set(t, Math.max(tried.get(t) ?? -1, at)); break; }
        done.add(t); passed.push(t); moved = true;
        skip(k); handOn();
      }
    }
  }
  return { passed, failed: chains.map((c, k) => (pos[k] < c.length ? c[pos[k]] : undefined)) };
}

// A certified bound on the accuracy drop of a policy against the full model.
// Only rows where the two disagree carry evidence: with labels, the paired drop
// is P(full right, policy wrong) − P(full wrong, policy right); without labels,
// the drop in agreement with the full model is the disagreement rate itself,
// and that rate bounds the labelled loss term from above, so unlabelled rows
// (cheap for a sensor engineer) tighten it. The union bound splits δ over the
// limits used, fixed in advance so the choice never looks at the data.
import { clopperPearsonLower, clopperPearsonUpper } from './binomial.js';

/** Labelled rows of the certification part. */
export interface PairedCounts { n: number; /** full model right, policy wrong */ lost: number; /** full model wrong, policy right */ gained: number }
/** Rows (labelled or not) where the policy's answer differs from the full model's. */
export interface AgreementCounts { n: number; disagree: number }

export interface DropBound {
  /** observed drop, as a fraction (not points) */
  estimate: number;
  /** holds with probability ≥ 1 − δ over the draw of the rows, as a fraction */
  bound: number;
  delta: number;
  method: 'paired' | 'disagreement' | 'paired+disagreement';
}

/** Upper confidence bound on the drop; needs `paired` (labels) or `agreement` (any rows) or both. */
export function dropBound(o: { paired?: PairedCounts; agreement?: AgreementCounts }, delta: number): DropBound {
  const { paired: p, agreement: a } = o;
  if (p && a && a.n > 0) {
    const lostU = Math.min(clopperPearsonUpper(p.lost, p.n, delta / 4), clopperPearsonUpper(a.disagree, a.n, delta / 4));
    return { estimate: p.n ? (p.lost - p.gained) / p.n : 0, bound: lostU - clopperPearsonLower(p.gained, p.n, delta / 2), delta, method: 'paired+disagreement' };
  }
  if (p) {
    return { estimate: p.n ? (p.lost - p.gained) / p.n : 0, bound: clopperPearsonUpper(p.lost, p.n, delta / 2) - clopperPearsonLower(p.gained, p.n, delta / 2), delta, method: 'paired' };
  }
  if (a) return { estimate: a.n ? a.disagree / a.n : 0, bound: clopperPearsonUpper(a.disagree, a.n, delta), delta, method: 'disagreement' };
  throw new RangeError('a drop bound needs paired or agreement counts');
}

/**
 * Rows the same rates would need for the bound to reach `maxDrop` (a fraction), scaling every count
 * by the same factor; undefined when the observed drop itself is not below maxDrop (no sample size helps).
 */
export function rowsNeeded(o: { paired?: PairedCounts; agreement?: AgreementCounts }, maxDrop: number, delta: number, limit = 1e9): number | undefined {
  const now = dropBound(o, delta);
  if (now.bound <= maxDrop) return o.paired?.n ?? o.agreement?.n ?? 0;
  if (!(now.estimate < maxDrop)) return undefined;
  const base = o.paired?.n ?? o.agreement!.n;
  const at = (m: number) => {
    const f = m / base;
    const sc = (x: number, n: number) => Math.min(Math.round(x * f), n);
    const p = o.paired && { n: Math.round(o.paired.n * f), lost: 0, gained: 0 };
    if (p) { p.lost = sc(o.paired!.lost, p.n); p.gained = sc(o.paired!.gained, p.n); }
    const a = o.agreement && { n: Math.round(o.agreement.n * f), disagree: 0 };
    if (a) a.disagree = sc(o.agreement!.disagree, a.n);
    return dropBound({ paired: p || undefined, agreement: a || undefined }, delta).bound <= maxDrop;
  };
  let lo = base, hi = base * 2;
  while (!at(hi)) { lo = hi; hi *= 2; if (hi > limit) return undefined; }
  while (hi - lo > Math.max(1, lo * 0.002)) { const mid = Math.floor((lo + hi) / 2); if (at(mid)) hi = mid; else lo = mid; }
  return hi;
}

// Choosing an exit's head among a few kinds, on the held-out rows of the fit (rows
// that certify nothing). What a head is worth is what it lets exit: the share of
// held-out rows its most confident answers cover before disagreeing with the final
// output on more than EXIT_TOLERANCE of them, times the MACs an exit there skips,
// less the head's own MACs, which every frame reaching the exit pays.
import type { HeadKind } from './spec.js';

/** Tried when no head is named: the plain head, coarse position kept at two grids, and one hidden layer. */
export const HEAD_CHOICES: readonly HeadKind[] = [
  { kind: 'linear' }, { kind: 'grid', cells: 2 }, { kind: 'grid', cells: 4 }, { kind: 'mlp', hidden: 32 },
];

/** Disagreement allowed among the rows taken to exit (the default promise is a 1-point drop). */
export const EXIT_TOLERANCE = 0.01;

/**
 * The largest share of `rows` that can exit: rows ordered by confidence (the head's top softmax
 * probability, highest first; row order on ties), the longest prefix whose disagreement with `teacher`
 * is at most `tolerance` of its length.
 */
export function exitableShare(logits: ArrayLike<number>, k: number, teacher: Int32Array, rows: Int32Array, tolerance = EXIT_TOLERANCE): number {
  if (!rows.length) return 0;
  const conf = new Float64Array(rows.length), agree = new Uint8Array(rows.length);
  rows.forEach((r, i) => {
    let mx = -Infinity, b = 0;
    for (let c = 0; c < k; c++) if (logits[r * k + c] > mx) { mx = logits[r * k + c]; b = c; }
    let sum = 0;
    for (let c = 0; c < k; c++) sum += Math.exp(logits[r * k + c] - mx);
    conf[i] = 1 / sum;
    agree[i] = b === teacher[r] ? 1 : 0;
  });
  const order = Array.from(rows, (_, i) => i).sort((a, b) => conf[b] - conf[a] || a - b);
  let wrong = 0, best = 0;
  order.forEach((i, j) => {
    wrong += 1 - agree[i];
    if (wrong <= tolerance * (j + 1)) best = j + 1;
  });
  return best / rows.length;
}

/** One head tried at an exit, as the metadata records it. */
export interface HeadTrial {
  head: string; macs: number; params: number;
  /** argmax agreement with the final output on the held-out rows */
  agreement: number;
  /** exitableShare on the held-out rows */
  exitable: number;
  /** exitable × (MACs an exit here skips) − the head's MACs, per frame */
  worth: number;
  /** more parameters than the layers after the cut: not chosen (the linear head never is) */
  tooLarge?: true;
}

/** The trial worth most among those not too large; on equal worth the one with fewer parameters, then the earlier one. */
export function bestTrial(trials: HeadTrial[]): number {
  let b = -1;
  trials.forEach((t, i) => {
    const m = trials[b];
    if (t.tooLarge) return;
    if (!m || t.worth > m.worth || (t.worth === m.worth && t.params < m.params)) b = i;
  });
  return Math.max(b, 0);
}

/** The rule in words, as the metadata records it beside the heads tried. */
export const CHOICE_RULE = `worth = exitable × MACs skipped − head MACs, among heads with no more parameters than the layers after the cut; exitable: the held-out share the head's most confident answers cover at ≤ ${EXIT_TOLERANCE * 100} % disagreement with the final output`;

export const worthOf = (exitable: number, skipped: number, headMacs: number): number => exitable * skipped - headMacs;

// The words every report uses for the same things (docs/glossary.md): the final output, counts
// with their unit, points, and the promise in one plain sentence. Text, HTML and the demo read
// them from here, so one screen never says "logits" where another says "final".
import type { Guarantee } from '../certify/guarantee.js';

/** The model's own output at the end of the chain, in every table and histogram. */
export const FINAL = 'final';

/** An exit's display name: exits keep theirs, the last entry of a chain's outputs is the final output. */
export const exitLabel = (names: string[], k: number) => (k === names.length - 1 ? FINAL : names[k] ?? `exit-${k}`);

/** "1 scene", "352 scenes", "1 sample". */
export const count = (n: number, unit: string) => `${n} ${n === 1 ? unit.replace(/s$/, '') : unit}`;

/** Percentage points in words: "1 point", "0.83 points", "2 points". */
export function points(x: number, digits = 2): string {
  const v = Number.isInteger(x) ? String(x) : x.toFixed(digits);
  return `${v} ${v === '1' ? 'point' : 'points'}`;
}

const conf = (c: number) => `${+(c * 100).toFixed(4)} %`;

/**
 * The promise as an engineer reads it, one sentence: what holds on new data, against what, how
 * sure. `against` names the reference the drop is measured from (the full model, or the full int8 chain).
 */
export function promiseSentence(g: Guarantee, against = 'the full model'): string {
  const what = g.unit === 'scenes' ? 'on new recordings like this one, accuracy averaged over scenes' : 'on new data like this, accuracy';
  if (!g.certified) {
    const need = g.next?.needed !== undefined ? `; about ${count(g.next.needed, g.unit)} would certify the next setting`
      : g.next ? `; more data would not help (the next setting already loses ${points(g.next.estimate)})` : '';
    return `no promise: on ${count(g.evidence, g.unit)} nothing cheaper than ${against} stays within ${points(g.maxDrop)} at ${conf(g.confidence)} confidence, so ${against} is kept${need}`;
  }
  return `${what} drops by at most ${points(g.maxDrop)} against ${against}, with ${conf(g.confidence)} confidence ` +
    `(certified on ${count(g.evidence, g.unit)}${g.unlabelled ? ` and ${count(g.unlabelled, 'unlabelled rows')}` : ''}: bound ${points(g.bound)})`;
}

/** A drop in words; a negative one is a gain. */
export const dropWords = (x: number) => (x < 0 ? `${points(-x)} better` : `drop ${points(x)}`);

// The exit cache: every exit's logits (and the final output's) for every
// sample, captured once; all policy evaluation then runs on it. Layout
// [samples × (exits + 1) × classes], slot `exits` being the final output.
import { OfframpError } from '../errors.js';
import { argmax, type ExitView } from '../policy/index.js';

export interface ExitCache {
  samples: number;
  /** early exits (heads); the final output is one more slot */
  exits: number;
  classes: number;
  logits: Float32Array;
  /** the true labels, or the full model's argmax when `labelled` is false */
  labels: Int32Array;
  labelled: boolean;
}

/**
 * MACs of the chain, per exit. `stage[k]` is what runs between exit k−1 and exit k (k = exits: up to the
 * final output); `head[k]` the head making exit k. Heads already counted inside the stages: pass zeros.
 */
export interface ExitCosts { stage: number[]; head: number[] }

export function makeCache(samples: number, exits: number, classes: number, logits: Float32Array, labels?: ArrayLike<number>): ExitCache {
  if (logits.length !== samples * (exits + 1) * classes) throw new OfframpError('data', `exit cache holds ${logits.length} values, expected ${samples} × ${exits + 1} × ${classes}`);
  const lab = new Int32Array(samples);
  if (labels) {
    if (labels.length !== samples) throw new OfframpError('data', `${labels.length} labels for ${samples} samples`);
    for (let i = 0; i < samples; i++) {
      const l = Number(labels[i]);
      if (!Number.isInteger(l) || l < 0 || l >= classes) throw new OfframpError('data', `label ${labels[i]} outside 0…${classes - 1}`, undefined, `sample ${i}`);
      lab[i] = l;
    }
  } else for (let i = 0; i < samples; i++) lab[i] = argmax(logits, (i * (exits + 1) + exits) * classes, classes);
  return { samples, exits, classes, logits, labels: lab, labelled: !!labels };
}

/** MACs to have exit k's output: the stages and heads up to it (all heads for the final output). */
export function reachOf(c: ExitCosts, exits: number): Float64Array {
  if (c.stage.length !== exits + 1 || c.head.length !== exits) throw new OfframpError('data', `costs for ${c.stage.length} stages and ${c.head.length} heads, expected ${exits + 1} and ${exits}`);
  const r = new Float64Array(exits + 1);
  let acc = 0;
  for (let k = 0; k <= exits; k++) { acc += c.stage[k] + (k < exits ? c.head[k] : 0); r[k] = acc; }
  return r;
}

/** Sample i's exits as the policy walk reads them. */
export function viewOf(c: ExitCache, i: number): ExitView {
  const base = i * (c.exits + 1) * c.classes;
  return { data: () => c.logits, offset: (k) => base + k * c.classes };
}

/**
 * The tune/held-out split, deterministic. Shuffled data (`interleave`): sample i is held out when
 * ⌊(i+1)·f⌋ > ⌊i·f⌋, which spreads the held-out share f evenly over the file (f = ½: every odd index).
 * Streams (`tail`): the last ⌊N·f⌋ frames are held out, so both parts keep their temporal order.
 */
export function splitParts(samples: number, heldOut: number, mode: 'interleave' | 'tail'): { tune: Int32Array; held: Int32Array } {
  if (!(heldOut > 0 && heldOut < 1)) throw new OfframpError('usage', `held-out share must lie strictly between 0 and 1, not ${heldOut}`);
  const tune: number[] = [], held: number[] = [];
  const cut = samples - Math.floor(samples * heldOut);
  for (let i = 0; i < samples; i++) {
    const h = mode === 'tail' ? i >= cut : Math.floor((i + 1) * heldOut) > Math.floor(i * heldOut);
    (h ? held : tune).push(i);
  }
  return { tune: Int32Array.from(tune), held: Int32Array.from(held) };
}

/** The cache restricted to some rows (in the order given). */
export function rowsOf(c: ExitCache, idx: ArrayLike<number>): ExitCache {
  const w = (c.exits + 1) * c.classes, n = idx.length;
  const logits = new Float32Array(n * w), labels = new Int32Array(n);
  for (let j = 0; j < n; j++) { logits.set(c.logits.subarray(idx[j] * w, (idx[j] + 1) * w), j * w); labels[j] = c.labels[idx[j]]; }
  return { ...c, samples: n, logits, labels };
}

// The capture pass over a split: every sample through the staged chain once,
// keeping each exit's logits and the final output's in an ExitCache. Also what
// the tuner needs from the manifest: exits in order, the final output, costs per exit.
import { OfframpError } from '../errors.js';
import { npyBatches, readDataHeader, sampleShape, toFloat32 } from '../data/npy.js';
import { tensorFromData, type OrtTensor } from '../runtime/ort.js';
import type { Chain } from '../run/chain.js';
import type { Manifest } from '../split/manifest.js';
import { makeCache, type ExitCache, type ExitCosts } from './cache.js';

export interface ChainLayout {
  /** exit output names, in the order the chain makes them */
  exits: string[];
  /** stage making each exit */
  exitStage: number[];
  /** the model's own output (the classifier's logits) */
  final: string;
  classes: number;
  /** per exit (final last), with heads counted inside their stages */
  costs: ExitCosts;
  /** the model input fed */
  input: string;
}

const width = (shape: (number | string)[]) => shape.slice(1).reduce<number>((a, d) => a * (typeof d === 'number' ? d : NaN), 1);

/** What replay and the tuner read from a manifest: exits in chain order, the final output, classes, MACs per exit. */
export function chainLayout(m: Manifest, file?: string): ChainLayout {
  const exits: string[] = [], exitStage: number[] = [];
  for (const s of m.stages) for (const e of s.exits) { exits.push(e); exitStage.push(s.index); }
  if (!exits.length) throw new OfframpError('data', 'the split has no exit outputs (graft exit heads before splitting)', file);
  const finals = m.outputs.filter((o) => !exits.includes(o.name));
  if (finals.length !== 1) throw new OfframpError('data', `expected one model output besides the exits, found ${finals.length} (${finals.map((o) => o.name).join(', ')})`, file);
  const classes = width(finals[0].shape);
  if (!Number.isInteger(classes) || classes < 1) throw new OfframpError('data', `the final output '${finals[0].name}' has no fixed class count (shape [${finals[0].shape.join(', ')}])`, file);
  for (const e of exits) {
    const t = m.outputs.find((o) => o.name === e);
    if (t && width(t.shape) !== classes) throw new OfframpError('data', `exit '${e}' has ${width(t.shape)} values per sample, the final output ${classes}`, file);
  }
  if (m.inputs.length !== 1) throw new OfframpError('data', `the chain has ${m.inputs.length} inputs; tuning feeds one`, file);
  const stage: number[] = [];
  let from = 0;
  for (const s of [...exitStage, m.stages.length - 1]) {
    let macs = 0;
    for (let i = from; i <= s; i++) macs += m.stages[i].macs;
    stage.push(macs);
    from = s + 1;
  }
  return { exits, exitStage, final: finals[0].name, classes, costs: { stage, head: exits.map(() => 0) }, input: m.inputs[0].name };
}

export { readLabels } from '../data/labels.js';

/** Frames of a .npy as batch-1 tensors for the chain's input, one at a time. */
export function* frames(m: Manifest, file: string, limit = Infinity): Generator<OrtTensor> {
  const t = m.inputs[0];
  const shape = [1, ...sampleShape(readDataHeader(file), t.shape, file)];
  if (t.dtype !== 'float32') throw new OfframpError('data', `the chain input '${t.name}' is ${t.dtype}; tuning feeds float32`, file);
  let n = 0;
  for (const b of npyBatches(file, 256)) {
    const x = toFloat32(b.data), per = x.length / b.rows;
    for (let r = 0; r < b.rows && n < limit; r++, n++) yield tensorFromData(1, shape, x.slice(r * per, (r + 1) * per));
  }
}

/** Copy one sample's logits of an output into `out` at `off`, checking the width. */
export function copyLogits(t: OrtTensor | undefined, name: string, classes: number, out: Float32Array, off: number): void {
  if (!t || t.type !== 'float32' || t.size !== classes) throw new OfframpError('runtime', `output '${name}' came out as ${t ? `${t.type}[${t.dims.join(', ')}]` : 'nothing'}, expected float32 with ${classes} values`);
  out.set(t.data as Float32Array, off);
}

/** Run every sample of `data` through the whole chain; labels (when given) must count as many rows. */
export async function captureCache(chain: Chain, data: string, labels?: Int32Array, onProgress?: (n: number) => void): Promise<{ cache: ExitCache; layout: ChainLayout }> {
  const layout = chainLayout(chain.manifest, chain.dir);
  const rows = readDataHeader(data).rows;
  if (labels && labels.length !== rows) throw new OfframpError('data', `${labels.length} labels for ${rows} samples`, data);
  const E = layout.exits.length, C = layout.classes, names = [...layout.exits, layout.final];
  const logits = new Float32Array(rows * (E + 1) * C);
  let i = 0;
  for (const x of frames(chain.manifest, data)) {
    const r = await chain.run({ [layout.input]: x });
    names.forEach((nm, k) => copyLogits(r.outputs[nm], nm, C, logits, (i * (E + 1) + k) * C));
    i++;
    if (onProgress && (i % 100 === 0 || i === rows)) onProgress(i);
  }
  return { cache: makeCache(rows, E, C, logits, labels), layout };
}

// What the firmware tables hold, read off a split manifest: stages in order
// with their tensors, which stage makes each exit, the class count, and the
// MACs to reach each exit (a budget's cap is computed from them).
import { OfframpError } from '../errors.js';
import type { Manifest, ManifestTensor } from '../split/manifest.js';

/** `offset`: the tensor's place in its stage's arena (undefined without an arena plan) */
export interface TableTensor { name: string; dtype: string; elements: number; bytes: number; offset?: number }
export interface TableBuffer { name: string; offset: number; bytes: number; first: number; last: number }
export interface TableStage {
  file: string;
  macs: bigint;
  inputs: TableTensor[];
  outputs: TableTensor[];
  weightBytes: number;
  peakActivationBytes: number;
  /** the arena plan of the stage file (0 and none where the manifest has no plan) */
  arenaBytes: number;
  buffers: TableBuffer[];
  /** exits this stage makes, ascending; the final output is index `exits` */
  exits: number[];
}
export interface ChainTable {
  stages: TableStage[];
  exits: number;
  classes: number;
  /** stage making exit k (k = exits: the final output) */
  exitStage: number[];
  /** MACs to have exit k's output: all stages up to the one making it */
  reach: bigint[];
  exitNames: string[];
  finalOutput: string;
  /** alignment of every arena offset (the manifest's; 0 where no stage has an arena plan) */
  arenaAlign: number;
  /** int8 parameters of each exit's logits (final last), where the manifest has them for all (a quantized split) */
  exitQ8?: { scale: number; zeroPoint: number }[];
}

const EXIT_NAME = /^exit-(\d+)$/;
const U32 = 0xffffffff;

function elementsOf(t: ManifestTensor): number {
  if (!t.shape.every((d) => typeof d === 'number')) return 0;
  return (t.shape as number[]).reduce((a, d) => a * d, 1);
}

/** `file` names the manifest in errors. */
export function chainTable(m: Manifest, file?: string): ChainTable {
  const bad = (msg: string, where?: string) => new OfframpError('data', msg, file, where);
  if (!Array.isArray(m.stages) || !m.stages.length) throw bad('no stages');
  const made = m.stages.flatMap((s) => s.exits.map((name) => ({ name, stage: s.index })));
  if (!made.length) throw bad('no exit outputs in any stage: nothing to decide (graft exit heads first)');
  // Exit k is exit-k where every exit is so named; otherwise the order the stages make them.
  const numbered = made.every((e) => EXIT_NAME.test(e.name));
  const ordered = numbered ? [...made].sort((a, b) => Number(EXIT_NAME.exec(a.name)![1]) - Number(EXIT_NAME.exec(b.name)![1])) : made;
  if (numbered) ordered.forEach((e, k) => { if (e.name !== `exit-${k}`) throw bad(`exits must be numbered exit-0 … exit-${ordered.length - 1}, found ${e.name}`); });
  const exitNames = ordered.map((e) => e.name);
  const isExit = new Set(exitNames);

  const tensorOf = (name: string): ManifestTensor | undefined => m.outputs.find((o) => o.name === name)
    ?? m.stages.flatMap((s) => s.outputs).find((o) => o.name === name);
  const finals = m.outputs.filter((o) => !isExit.has(o.name));
  const exit0 = tensorOf(exitNames[0]);
  if (!exit0) throw bad(`exit ${exitNames[0]} is not described`, 'outputs');
  const classes = elementsOf(exit0);
  if (!(classes >= 1)) throw bad(`exit ${exitNames[0]} has no concrete shape (${exit0.shape.join('×')})`, 'outputs');
  const sized = finals.length === 1 ? finals : finals.filter((o) => elementsOf(o) === classes);
  if (sized.length !== 1) throw bad(`cannot tell the final output among ${finals.map((o) => o.name).join(', ') || 'no outputs'}`, 'outputs');
  const finalOutput = sized[0].name;
  for (const name of [...exitNames, finalOutput]) {
    const t = tensorOf(name)!;
    if (elementsOf(t) !== classes) throw bad(`${name} holds ${elementsOf(t)} values, exit ${exitNames[0]} ${classes}: every exit and the final output must have the same classes`, 'outputs');
  }

  const producer = (name: string) => m.stages.find((s) => s.outputs.some((o) => o.name === name))?.index;
  const exitStage = [...ordered.map((e) => e.stage), producer(finalOutput)];
  if (exitStage[exitStage.length - 1] === undefined) throw bad(`no stage makes the final output ${finalOutput}`);
  for (let k = 1; k < exitStage.length; k++) if (exitStage[k]! < exitStage[k - 1]!) throw bad(`exit ${k} comes from stage ${exitStage[k]}, before exit ${k - 1}'s stage ${exitStage[k - 1]}`);

  const tensor = (t: ManifestTensor, where: string, offsets: Map<string, number>): TableTensor => {
    const elements = elementsOf(t);
    if (elements > U32 || t.bytes > U32) throw bad(`${t.name} is over 4 GiB`, where);
    const offset = offsets.get(t.name);
    return { name: t.name, dtype: t.dtype, elements, bytes: t.bytes, ...(offset !== undefined && { offset }) };
  };
  const u32 = (v: unknown, what: string, where: string): number => {
    if (typeof v !== 'number' || !Number.isInteger(v) || v < 0 || v > U32) throw bad(`${what} must be a whole number below 4 GiB, not ${JSON.stringify(v)}`, where);
    return v;
  };
  const macsOf = (v: number | string, where: string): bigint => {
    if (typeof v === 'string' ? !/^\d+$/.test(v) : !Number.isSafeInteger(v) || v < 0) throw bad(`MACs must be a whole number, not ${v}`, where);
    return BigInt(v);
  };
  const stages: TableStage[] = m.stages.map((s, i) => {
    const where = `stages[${i}]`;
    if (s.index !== i) throw bad(`stage index ${s.index} out of order`, where);
    // A manifest written before arena plans has none: the table says so (arena 0, no buffers).
    const buffers: TableBuffer[] = (s.arena?.buffers ?? []).map((b, j) => {
      const at = `${where}.arena.buffers[${j}]`;
      return { name: String(b.name), offset: u32(b.offset, 'offset', at), bytes: u32(b.bytes, 'bytes', at), first: u32(b.first, 'first', at), last: u32(b.last, 'last', at) };
    });
    const offsets = new Map(buffers.map((b) => [b.name, b.offset]));
    return {
      file: s.file, macs: macsOf(s.macs as number | string, where),
      inputs: s.inputs.map((t) => tensor(t, where, offsets)), outputs: s.outputs.map((t) => tensor(t, where, offsets)),
      weightBytes: s.weightBytes, peakActivationBytes: s.peakActivationBytes,
      arenaBytes: s.arena ? u32(s.arenaBytes, 'arenaBytes', where) : 0, buffers,
      exits: exitStage.flatMap((st, k) => (st === i ? [k] : [])),
    };
  });
  const aligns = [...new Set(m.stages.filter((s) => s.arena).map((s) => s.arena!.align))];
  if (aligns.length > 1) throw bad(`arena plans with different alignments (${aligns.join(', ')})`, 'stages');
  const arenaAlign = aligns.length ? u32(aligns[0], 'arena.align', 'stages') : 0;
  stages.forEach((s, i) => s.buffers.forEach((b, j) => { if (b.offset % (arenaAlign || 1)) throw bad(`offset ${b.offset} is not a multiple of ${arenaAlign}`, `stages[${i}].arena.buffers[${j}]`); }));
  const cumulative: bigint[] = [];
  stages.reduce((a, s) => { const v = a + s.macs; cumulative.push(v); return v; }, 0n);
  const q8 = [...exitNames, finalOutput].map((n) => tensorOf(n)?.quant);
  for (const q of q8) if (q && !(q.scale > 0 && Number.isFinite(q.scale) && Number.isInteger(q.zeroPoint) && q.zeroPoint >= -128 && q.zeroPoint <= 127)) throw bad(`int8 parameters out of range: scale ${q.scale}, zero point ${q.zeroPoint}`, 'outputs');
  const exitQ8 = q8.every(Boolean) ? q8.map((q) => ({ scale: q!.scale, zeroPoint: q!.zeroPoint })) : undefined;
  return { stages, exits: exitNames.length, classes, exitStage: exitStage as number[], reach: exitStage.map((st) => cumulative[st!]), exitNames, finalOutput, arenaAlign, ...(exitQ8 && { exitQ8 }) };
}

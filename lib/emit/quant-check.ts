// Before firmware is written for a quantized chain: the manifest must say what its stage files do.
// The int8 decision functions (`_q8`) read each exit's scale and zero point from the manifest, so one
// that is missing, or differs from the DequantizeLinear that makes the output in the stage file, would
// give firmware contradicting the file; a float stage inside a quantized chain is not an int8 chain.
import path from 'node:path';
import fs from 'node:fs';
import { parseModel } from '../graph/io.js';
import { tensorNumbers } from '../onnx/tensor.js';
import type { Manifest } from '../split/manifest.js';
import { OfframpError } from '../errors.js';

/** Refuse a quantized manifest whose outputs' `quant` the stage files do not bear out. */
export function checkQuantizedChain(m: Manifest, manifestFile: string): void {
  if (!m.quantization) return;
  const dir = path.dirname(manifestFile);
  const made = new Map<string, { scale?: number; zeroPoint?: number; file: string }>();
  m.stages.forEach((s, i) => {
    const file = path.join(dir, s.file);
    const g = parseModel(fs.readFileSync(file), file).graph;
    if (!g.nodes.some((n) => n.op === 'QuantizeLinear' || n.op === 'DequantizeLinear'))
      throw new OfframpError('data', `stage ${i} (${s.file}) holds no QuantizeLinear or DequantizeLinear: a float stage inside a quantized chain`, manifestFile, `stages[${i}]`);
    const value = (name: string | undefined) => {
      const t = name ? g.initializers.get(name) : undefined;
      const v = t && tensorNumbers(t);
      return v && v.length === 1 ? Number(v[0]) : undefined;
    };
    for (const o of g.outputs) {
      const n = g.nodes.find((x) => x.outputs.includes(o.name));
      if (n?.op === 'DequantizeLinear') made.set(o.name, { scale: value(n.inputs[1]), zeroPoint: n.inputs[2] ? value(n.inputs[2]) : 0, file });
      else made.set(o.name, { file });
    }
  });
  m.outputs.forEach((t, k) => {
    const at = `outputs[${k}]`;
    if (!t.quant) throw new OfframpError('data', `'${t.name}' has no quant: the int8 decision functions need its scale and zero point`, manifestFile, at);
    const f = made.get(t.name);
    if (!f || f.scale === undefined) throw new OfframpError('data', `'${t.name}' is not made by a DequantizeLinear with one scale in ${f ? path.basename(f.file) : 'any stage file'}`, manifestFile, at);
    // The manifest holds the float64 the file's float32 scale was made from (or its float32 value): equal at float32.
    if (Math.fround(t.quant.scale) !== Math.fround(f.scale) || t.quant.zeroPoint !== f.zeroPoint)
      throw new OfframpError('data', `quant of '${t.name}' (scale ${t.quant.scale}, zero point ${t.quant.zeroPoint}) differs from its stage file ${path.basename(f.file)} (scale ${f.scale}, zero point ${f.zeroPoint})`, manifestFile, at);
  });
}

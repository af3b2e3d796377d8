// `offramp quantize DIR --data X.npy -o QDIR`: int8 QDQ stage files, calibrated on the data.
import type { Command } from 'commander';
import { quantizeSplit, DEFAULT_CALIBRATION } from '../quant/split.js';
import { CALIBRATION_METHODS, DEFAULT_PERCENTILE, type CalibrationMethod } from '../quant/calibrate.js';
import { toJson, table, bytes as fmtBytes } from '../report/units.js';
import { usageError } from '../errors.js';
import { emit } from './common.js';
import { progressBar } from './progress.js';
import { refuseInputsAsOutputs, splitReads } from './guard.js';
import { readManifestFile } from '../split/read.js';
import path from 'node:path';

/** What a quantize commit writes or removes in QDIR (split/commit.ts): none of it may be an input. */
const COMMITTED = /^(stage-\d+(\.[0-9a-f]{16})?\.onnx|manifest\.json|report\.(json|html)|int8)$/;

export function quantizeCommand(program: Command): void {
  program.command('quantize')
    .description('post-training int8 quantization of a split: QDQ stage files calibrated on data, int8 handover between stages')
    .argument('<dir>', 'float split folder (or its manifest.json)')
    .requiredOption('--data <file>', '.npy calibration inputs [N, ...]')
    .requiredOption('-o, --out <dir>', 'output split folder')
    .option('--calibration <method>', `activation ranges: ${CALIBRATION_METHODS.join(', ')}`, DEFAULT_CALIBRATION)
    .option('--percentile <p>', 'for percentile: share of values kept at each end, in percent', String(DEFAULT_PERCENTILE))
    .option('--samples <n>', 'calibration rows to use (the first ones; default all)')
    .option('--json', 'machine-readable result (schema offramp-quantize/1)')
    .action(async (dir: string, o: { data: string; out: string; calibration: string; percentile: string; samples?: string; json?: boolean }) => {
      if (!CALIBRATION_METHODS.includes(o.calibration as CalibrationMethod)) throw usageError(`--calibration takes ${CALIBRATION_METHODS.join(', ')}, not '${o.calibration}'`);
      const pct = Number(o.percentile);
      if (!(pct > 50 && pct <= 100)) throw usageError(`--percentile takes a number above 50 and at most 100, not '${o.percentile}'`);
      const samples = o.samples === undefined ? undefined : Number(o.samples);
      if (samples !== undefined && !(Number.isInteger(samples) && samples > 0)) throw usageError(`--samples takes a positive whole number, not '${o.samples}'`);
      const { manifest } = readManifestFile(dir);
      refuseInputsAsOutputs([...splitReads(dir, manifest), { file: o.data, role: 'data' }], [], [
        { dir: o.out, names: COMMITTED }, { dir: path.join(o.out, 'int8'), names: COMMITTED },
        { dir: path.join(o.out, 'firmware'), names: /^offramp_policy\.[ch]$/ },
      ]);
      const bar = progressBar(!o.json && !!process.stderr.isTTY);
      const r = await quantizeSplit(dir, {
        data: o.data, out: o.out, calibration: o.calibration as CalibrationMethod, percentile: pct, samples,
        onProgress: bar && ((d, t) => bar('calib', d, t)),
      });
      const m = r.manifest;
      if (o.json) {
        emit(toJson({ schema: 'offramp-quantize/1', dir: r.dir, quantization: m.quantization, weights: r.weights, biases: r.biases,
          stages: m.stages.map((s) => ({ index: s.index, file: s.file, weightBytes: s.weightBytes, peakActivationBytes: s.peakActivationBytes, arenaBytes: s.arenaBytes, handoverBytes: s.handoverBytes })),
          outputs: m.outputs.map((t) => ({ name: t.name, ...(t.quant && { quant: t.quant }) })) }) + '\n');
        return;
      }
      const cal = m.quantization!.calibration;
      const rows = m.stages.map((s) => [s.file, fmtBytes(s.weightBytes), fmtBytes(s.peakActivationBytes), s.arenaBytes === undefined ? '-' : fmtBytes(s.arenaBytes), s.handoverBytes ? fmtBytes(s.handoverBytes) : '-',
        s.outputs.filter((t) => t.quant).map((t) => `${t.name} ${t.dtype} s=${t.quant!.scale.toPrecision(4)} z=${t.quant!.zeroPoint}`).join(', ') || '-']);
      emit(`quantized  ${r.dir}: ${m.stages.length} stages, ${r.weights} weights int8 per channel, ${r.biases} biases int32, ${r.folded} batch norms folded\n` +
        (m.quantization!.opset ? `opset      ${m.quantization!.opset.from} raised to ${m.quantization!.opset.to} (per-channel QuantizeLinear needs it; every operator of the stages means the same there)\n` : '') +
        `calibrated ${cal.method}${cal.percentile !== undefined ? ` ${cal.percentile} %` : ''} on ${cal.samples} rows of ${o.data}\n\n` +
        `${table(['stage', 'weights', 'peak act.', 'arena', 'hands over', 'outputs (int8 parameters)'], rows)}\n\n` +
        `next: offramp check ${r.dir} --against <model> --data …, then offramp tune ${r.dir} (the float policy is not carried over)\n`);
    });
}

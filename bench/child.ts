// A measurement in a clean process: only what the measured code itself imports,
// so its peak RSS is the code's own. Prints one JSON line. The parent stays small
// too: Linux carries a parent's peak RSS into a child's ru_maxrss across fork+exec.
const [kind, file, out] = process.argv.slice(2);
const t0 = process.hrtime.bigint();
const ms = (from: bigint) => Number(process.hrtime.bigint() - from) / 1e6;
const res: Record<string, number> = {};
if (kind === 'npy') {
  // Calibration data far larger than a batch: a 256 MiB .npy (sparse on disk) read 256 rows at a time.
  const fs = await import('node:fs');
  const { npyBatches, npyHeaderBytes } = await import('../lib/data/npy.js');
  const rows = 65536, cols = 1024, head = npyHeaderBytes('<f4', [rows, cols]);
  fs.writeFileSync(file, head);
  fs.truncateSync(file, head.length + rows * cols * 4);
  const base = process.resourceUsage().maxRSS * 1024;
  let seen = 0;
  for (const b of npyBatches(file, 256)) seen += b.rows;
  res.rows = seen;
  res.fileBytes = head.length + rows * cols * 4;
  res.rssGrowthBytes = process.resourceUsage().maxRSS * 1024 - base;
  fs.rmSync(file);
} else if (kind === 'make') {
  const { resnet50 } = await import('../test/helpers/nets.js');
  const { saveModel } = await import('../lib/graph/io.js');
  saveModel(resnet50({ weights: 'random', seed: 7 }), file);
} else if (kind === 'cli') {
  const { main } = await import('../lib/cli/main.js');
  const code = await main(['cost', file, '--json', '-o', out]);
  if (code !== 0) throw new Error(`offramp cost exited ${code}`);
} else {
  const { loadModel } = await import('../lib/graph/io.js');
  const { decodeModel } = await import('../lib/onnx/codec.js');
  const fs = await import('node:fs');
  const buf = fs.readFileSync(file);
  const td = process.hrtime.bigint();
  decodeModel(buf);
  res.decodeOnlyMs = ms(td);
  const { analyzeModel } = await import('../lib/cost/analyze.js');
  const tl = process.hrtime.bigint();
  const m = loadModel(file);
  res.decodeMs = ms(tl);
  const t1 = process.hrtime.bigint();
  const r = await analyzeModel(m);
  res.costMs = ms(t1);
  res.macs = Number(r.model.macs);
}
res.totalMs = ms(t0);
res.maxRssBytes = process.resourceUsage().maxRSS * 1024;
process.stdout.write(JSON.stringify(res));

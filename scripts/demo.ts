// `npm run demo`: the whole job on the invented fan-vibration scenario (models-demo/).
// Writes the data, builds exits for the committed model against a generic Cortex-M4F
// profile, replays its per-frame policy on validation windows, then, in a folder of its own (the same
// stage files), tunes a stream policy on an ordered recording and replays it on a later recording.
// Every file the last lines point to describes that folder's final manifest.
import fs from 'node:fs';
import path from 'node:path';
import { main } from '../lib/cli/main.js';
import { writeDemoData } from './demo-data.js';

const root = path.resolve(path.dirname(new URL(import.meta.url).pathname), '../..');
// Relative paths, so what is printed reads the same on any machine.
process.chdir(root);
const at = (...p: string[]) => path.join('models-demo', ...p);
const data = (f: string) => at('data', f);
const out = at('out');
const stream = at('stream');

async function step(title: string, args: string[]): Promise<void> {
  process.stdout.write(`\n$ offramp ${args.join(' ')}\n`);
  const code = await main(args);
  if (code !== 0) { process.stderr.write(`demo: ${title} exited ${code}\n`); process.exit(code); }
}

writeDemoData(at('data'));
// 6000 labelled windows: 3000 fit the heads, 1500 search the policy, 1500 certify it.
await step('build', ['build', at('fan-monitor.onnx'), '--data', data('calib-x.npy'), '--labels', data('calib-y.npy'), '--target', 'm4f', '-o', out]);
// The per-frame policy on 2000 validation windows that neither fitted nor tuned anything.
await step('per-frame replay on new windows', ['replay', out, '--data', data('val-x.npy'), '--labels', data('val-y.npy')]);
// The stream policy gets a folder of its own (the same stage files, split from the build's grafted model),
// so that the build's report and firmware keep describing the build's manifest.
const grafted = path.join(out, (JSON.parse(fs.readFileSync(path.join(out, 'manifest.json'), 'utf8')) as { source: { file: string } }).source.file);
await step('stream folder', ['split', grafted, '-o', stream]);
// The recording's scenes are annotated (segments): each counts once as evidence. About 350 certifying
// scenes back a promise of 2 points; 1 point would need about twice the recording.
await step('stream tuning', ['tune', stream, '--data', data('stream-x.npy'), '--labels', data('stream-y.npy'), '--segments', data('stream-segments.npy'), '--stream', '--max-drop', '2', '--report', path.join(stream, 'tune.html')]);
await step('firmware code', ['emit-c', stream, '-o', path.join(stream, 'firmware')]);
// A later recording, never tuned on, without scene annotations: the policy has to notice every change
// itself, as on the device.
await step('replay', ['replay', stream, '--data', data('later-x.npy'), '--labels', data('later-y.npy'), '--csv', path.join(stream, 'replay.csv')]);
process.stdout.write(`
read   ${path.join(out, 'report.html')}: the build and its per-frame policy (firmware C in ${path.join(out, 'firmware')})
       ${path.join(stream, 'tune.html')}: the stream policy (firmware C in ${path.join(stream, 'firmware')}, frames in ${path.join(stream, 'replay.csv')})
`);

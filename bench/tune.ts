// Tuner throughput: settings evaluated per second on a 10k-sample, 4-exit
// synthetic cache (10 classes). Two figures: the evaluation pass alone (one
// setting over all 10k samples, the tuner's inner step) and a whole tune()
// run (scores, search, fronts, held-out checks) divided by the settings it
// evaluated. Prints one JSON line; bench/run.ts prints it with the target.
import { syntheticCache, syntheticCosts } from '../test/helpers/exit-cache.js';
import { preparePart, scoreTable, tally } from '../lib/tune/evaluate.js';
import { reachOf } from '../lib/tune/cache.js';
import { tune } from '../lib/tune/search.js';
import { mulberry32 } from '../lib/graph/build.js';

const N = 10_000, E = 4, C = 10;
const cache = syntheticCache(N, E, C, 1);
const costs = syntheticCosts(E);
const reach = reachOf(costs, E);
const part = preparePart(cache, Int32Array.from({ length: N }, (_, i) => i));
const table = scoreTable(cache, part, 'confidence');
const rnd = mulberry32(5);
const settings = Array.from({ length: 1024 }, () => Float64Array.from({ length: E }, () => 0.3 + 0.7 * rnd()));
const hist = new Int32Array(E + 1);
const cost = new Float64Array(E + 1);
for (let k = 0; k <= E; k++) cost[k] = reach[k] + 41 * Math.min(k + 1, E);

let sink = 0;
for (let i = 0; i < 2000; i++) sink += tally(table, part, settings[i & 1023], E, cost, hist).correct; // warm up the JIT
let evals = 0;
const t0 = performance.now();
while (performance.now() - t0 < 1000) for (let i = 0; i < 256; i++, evals++) sink += tally(table, part, settings[evals & 1023], E, cost, hist).correct;
const evalMs = performance.now() - t0;

const t1 = performance.now();
const r = tune(cache, costs, { maxDrop: 1 });
const tuneMs = performance.now() - t1;

process.stdout.write(JSON.stringify({ samples: N, exits: E, evalPerSec: (evals / evalMs) * 1000, tuneSettings: r.settings, tuneMs, tunePerSec: (r.settings / tuneMs) * 1000, sink: sink > 0 ? 1 : 0 }));

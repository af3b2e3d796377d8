// offramp as a dependency: the package packed as it would be published, then installed into a fresh
// project the way the README says, on a machine that reaches only the npm registry (onnxruntime-node's
// own downloads are also pointed at a closed port, so the check holds on a machine with internet too).
// Then the CLI and the documented library example run from that project. Reference: npm's documented
// behaviour (npm help install-scripts, package.json "files" and "exports"); Node's package exports.
import { describe, it, expect, beforeAll, afterAll } from 'vitest';
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { loadModel } from '../lib/graph/io.js';
import { analyzeModel } from '../lib/cost/analyze.js';

const ROOT = path.resolve(import.meta.dirname, '..');
const PKG = JSON.parse(fs.readFileSync(path.join(ROOT, 'package.json'), 'utf8')) as { name: string; version: string };
const MODEL = path.join(ROOT, 'models-demo/fan-monitor.onnx');
/** The README's install line; the test installs the tarball in place of the registry name. */
const INSTALL = 'ONNXRUNTIME_NODE_INSTALL=skip npm install offramp';
const ROWS = 400;

// The child npm must not inherit this run's npm settings (npm test exports npm_config_*, npm_package_*).
const cleanEnv = (extra: Record<string, string> = {}): NodeJS.ProcessEnv => ({
  ...Object.fromEntries(Object.entries(process.env).filter(([k]) => !/^npm_/i.test(k) && k !== 'INIT_CWD')),
  // any download onnxruntime-node's install script tried would go through this closed proxy and fail
  GLOBAL_AGENT_HTTP_PROXY: 'http://127.0.0.1:9', GLOBAL_AGENT_HTTPS_PROXY: 'http://127.0.0.1:9',
  ...extra,
});
const run = (cmd: string, args: string[], cwd: string, env: NodeJS.ProcessEnv = cleanEnv()) => {
  const t0 = Date.now();
  const r = spawnSync(cmd, args, { cwd, env, encoding: 'utf8', timeout: 90_000 });
  return { code: r.status, stdout: r.stdout ?? '', stderr: r.stderr ?? '', ms: Date.now() - t0, error: r.error };
};
const walk = (d: string, base = d): string[] => fs.readdirSync(d, { withFileTypes: true }).flatMap((e) => {
  const p = path.join(d, e.name);
  return e.isDirectory() ? walk(p, base) : [path.relative(base, p).split(path.sep).join('/')];
});

let work: string, tgz: string, packed: string[];
const project = (name: string, extra: Record<string, unknown> = {}) => {
  const dir = path.join(work, name);
  fs.mkdirSync(dir);
  fs.writeFileSync(path.join(dir, 'package.json'), JSON.stringify({ name: `consumer-${name}`, version: '1.0.0', private: true, type: 'module', ...extra }, null, 2));
  return dir;
};
const cudaFiles = (app: string) => walk(path.join(app, 'node_modules/onnxruntime-node/bin')).filter((f) => /providers_(cuda|tensorrt)|providers_shared/.test(f));

beforeAll(() => {
  work = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-package-'));
  // dist/ is already built (npm test runs tsc first); the pack must not rebuild it under the other tests
  const r = run('npm', ['pack', '--ignore-scripts', '--json', '--pack-destination', work], ROOT);
  expect(r.stderr).toBe('');
  expect(r.code).toBe(0);
  const info = JSON.parse(r.stdout) as { filename: string; files: { path: string }[] }[];
  tgz = path.join(work, info[0]!.filename);
  packed = info[0]!.files.map((f) => f.path).sort();
});
afterAll(() => { if (work) fs.rmSync(work, { recursive: true, force: true }); });

describe('the packed package', () => {
  it('holds the CLI, the library with its declarations and the C and assembly sources, and nothing else', () => {
    const allowed = [
      /^package\.json$/, /^README\.md$/, /^LICENSE$/,
      /^bin\/offramp\.js$/,
      /^dist\/lib\/.+\.(js|d\.ts)$/,
      /^lib\/.+\.(c|h|S|ld)$/,
      /^lib\/chip\/measured-rates\.json$/, // the built-in profiles' measured MAC rates, read at run time
    ];
    const outside = packed.filter((f) => !allowed.some((re) => re.test(f)));
    expect(outside).toEqual([]);
    // named so a failure says what leaked: tests, benchmarks, demo scripts, TypeScript sources
    expect(packed.filter((f) => /^(dist\/)?(test|bench|scripts)\//.test(f) || /(^|\/)[^/]+(?<!\.d)\.ts$/.test(f))).toEqual([]);
    // every library module, compiled with its declaration; every C file under lib/
    const sources = walk(path.join(ROOT, 'lib'));
    const want = [
      ...sources.filter((f) => f.endsWith('.ts')).flatMap((f) => [`dist/lib/${f.replace(/\.ts$/, '.js')}`, `dist/lib/${f.replace(/\.ts$/, '.d.ts')}`]),
      ...sources.filter((f) => /\.(c|h|S|ld)$/.test(f)).map((f) => `lib/${f}`),
      'bin/offramp.js', 'package.json', 'README.md', 'lib/chip/measured-rates.json',
    ];
    expect(want.filter((f) => !packed.includes(f))).toEqual([]);
  });

  it('installs as the README says with only the npm registry reachable, and fetches no GPU files', () => {
    expect(fs.readFileSync(path.join(ROOT, 'README.md'), 'utf8')).toContain(INSTALL);
    const app = project('app');
    const [env, ...cmd] = INSTALL.replace(/offramp$/, tgz).split(' ');
    const [k, v] = env!.split('=');
    const r = run(cmd[0]!, [...cmd.slice(1), '--prefer-offline', '--no-audit', '--no-fund'], app, cleanEnv({ [k!]: v! }));
    console.log(`npm install of the tarball: ${(r.ms / 1000).toFixed(1)} s`);
    expect(r.stderr).not.toMatch(/npm error/);
    expect(r.code).toBe(0);
    expect(cudaFiles(app)).toEqual([]);
    expect(fs.existsSync(path.join(app, 'node_modules/offramp/dist/lib/index.d.ts'))).toBe(true);
  });

  it('installs with the allowScripts denial the README names instead of the variable', () => {
    const app = project('denied', { allowScripts: { 'onnxruntime-node': false } });
    const r = run('npm', ['install', tgz, '--prefer-offline', '--no-audit', '--no-fund'], app);
    expect(r.stderr).not.toMatch(/npm error/);
    expect(r.code).toBe(0);
    expect(cudaFiles(app)).toEqual([]);
    expect(r.stderr).not.toMatch(/onnxruntime-node@/); // denied, so not listed as unreviewed either
  });

  it('npx offramp --version and npx offramp cost run from the installed package', async () => {
    const app = path.join(work, 'app');
    const v = run('npx', ['offramp', '--version'], app);
    expect(v.stderr).toBe('');
    expect(v.stdout.trim()).toBe(PKG.version);
    const c = run('npx', ['offramp', 'cost', MODEL], app);
    expect(c.stderr).toBe('');
    expect(c.code).toBe(0);
    // the same count the library in this checkout computes
    const macs = (await analyzeModel(loadModel(MODEL))).model.macs;
    expect(c.stdout).toContain(`(${macs})`);
  });

  it("runs docs/api.md's example against the installed package: cost, int8 build, chain, replay, firmware C", () => {
    const app = path.join(work, 'app');
    const doc = fs.readFileSync(path.join(ROOT, 'docs/api.md'), 'utf8');
    const example = /## A whole job in one script[\s\S]*?```js\n([\s\S]*?)```/.exec(doc)?.[1];
    expect(example).toBeDefined();
    fs.mkdirSync(path.join(app, 'models-demo/data'), { recursive: true });
    fs.copyFileSync(MODEL, path.join(app, 'models-demo/fan-monitor.onnx'));
    const s = samples(ROWS, 31);
    writeNpy(path.join(app, 'models-demo/data/calib-x.npy'), s.x, [ROWS, 1, BINS, FRAMES]);
    writeNpy(path.join(app, 'models-demo/data/calib-y.npy'), s.y, [ROWS]);
    fs.writeFileSync(path.join(app, 'example.mjs'), example!);
    const r = run(process.execPath, ['example.mjs'], app);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(r.stdout).toContain(`replayed ${ROWS} frames`);
    const m = JSON.parse(fs.readFileSync(path.join(app, 'out/manifest.json'), 'utf8'));
    expect(m.policy.guarantee.certified).toBe(true);
    expect(m.stages.length).toBeGreaterThan(1);
    // the fixed C sources come from the installed package's lib/, the rest is generated
    for (const f of ['offramp_policy.h', 'offramp_policy.c', 'offramp_kernels.h', 'offramp_run.c'])
      expect(fs.existsSync(path.join(app, 'firmware-src', f)), f).toBe(true);
    expect(fs.readFileSync(path.join(app, 'firmware-src', 'offramp_kernels.h'))).toEqual(fs.readFileSync(path.join(ROOT, 'lib/kernels/offramp_kernels.h')));
    for (const f of ['offramp_policy.h', 'offramp_policy.c']) expect(fs.existsSync(path.join(app, 'decision-src', f)), f).toBe(true);
    const m8 = JSON.parse(fs.readFileSync(path.join(app, 'out/int8/manifest.json'), 'utf8'));
    expect(m8.quantization).toBeDefined();
    expect(m8.policy.rule.kind).toBeDefined();
  });

  it('its declarations type a consumer, and the package refuses deep imports', () => {
    const app = path.join(work, 'app');
    fs.writeFileSync(path.join(app, 'check.ts'), [
      "import { buildExits, loadChain, type BuildResult, type Chain, type Policy } from 'offramp';",
      "import { planArena } from 'offramp/internals';",
      "// @ts-expect-error: only the root and offramp/internals are exported",
      "import { costModel } from 'offramp/dist/lib/cost/report.js';",
      'export const build: (file: string, o: { data: string; out: string }) => Promise<BuildResult> = buildExits;',
      'export const open: (where: string) => Promise<Chain> = loadChain;',
      "export const kind = (p: Policy): string => p.kind;",
      'export { planArena, costModel };',
    ].join('\n'));
    fs.writeFileSync(path.join(app, 'tsconfig.json'), JSON.stringify({
      compilerOptions: { strict: true, noEmit: true, skipLibCheck: true, module: 'nodenext', moduleResolution: 'nodenext', types: [] }, files: ['check.ts'],
    }));
    const r = run(process.execPath, [path.join(ROOT, 'node_modules/typescript/bin/tsc'), '-p', '.'], app);
    expect(r.stdout + r.stderr).toBe('');
    expect(r.code).toBe(0);
    const deep = run(process.execPath, ['--input-type=module', '-e', "await import('offramp/dist/lib/cost/report.js')"], app);
    expect(deep.stderr).toMatch(/ERR_PACKAGE_PATH_NOT_EXPORTED/);
  });

  it('prints the one line that fixes it when the runtime does not load', () => {
    const app = path.join(work, 'app');
    const bin = path.join(app, 'node_modules/onnxruntime-node/bin/napi-v6', process.platform, process.arch, 'onnxruntime_binding.node');
    fs.renameSync(bin, `${bin}.moved`);
    try {
      const r = run('npx', ['offramp', '--version'], app);
      expect(r.code).toBe(1);
      expect(r.stdout).toBe('');
      expect(r.stderr).toMatch(new RegExp(`^offramp: the onnxruntime-node runtime did not load \\(.+\\); reinstall it with: ONNXRUNTIME_NODE_INSTALL=skip npm install offramp@${PKG.version.replace(/\./g, '\\.')}\\n$`));
    } finally { fs.renameSync(`${bin}.moved`, bin); }
  });
});

// The command lines the README and docs/ quote are ones the CLI takes as written: every command exists
// and every option is one of that command's (commander's own option table, the source of --help), and
// the README's "On your own model" lines run, in order, on demo-scenario data under the names they use.
import { describe, it, expect } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { Command } from 'commander';
import { offramp } from './helpers/cli.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { COMMANDS } from '../lib/cli/main.js';

const ROOT = path.resolve(import.meta.dirname, '..');
const PAGES = ['README.md', ...fs.readdirSync(path.join(ROOT, 'docs')).filter((f) => f.endsWith('.md')).map((f) => `docs/${f}`)];

/** Each command's long and short option names, as commander parses them. */
function optionTable(): Map<string, Set<string>> {
  const program = new Command('offramp');
  for (const add of COMMANDS) add(program);
  return new Map(program.commands.map((c) => [c.name(), new Set(['--debug', '--help', '-h', ...c.options.flatMap((o) => [o.long, o.short].filter((x): x is string => !!x))])]));
}

/** Command lines quoted to be run as written: lines of fenced blocks, and inline code without syntax brackets. */
function quoted(text: string): string[] {
  const lines: string[] = [];
  for (const block of text.matchAll(/```[^\n]*\n([\s\S]*?)```/g)) {
    for (const l of block[1].split('\n')) {
      const m = /^(?:\$ |npx )?(offramp \S.*?)(?:\s+#.*)?$/.exec(l.trim());
      if (m) lines.push(m[1]);
    }
  }
  const prose = text.replace(/```[\s\S]*?```/g, '');
  for (const m of prose.matchAll(/`(?:npx )?(offramp [a-z-]+(?: [^`]*)?)`/g)) if (!/[[\]|…]/.test(m[1])) lines.push(m[1]);
  return lines;
}

describe('command lines in README.md and docs/', () => {
  const table = optionTable();
  it('name commands that exist, with options those commands take', () => {
    let n = 0;
    const bad: string[] = [];
    for (const page of PAGES) {
      for (const line of quoted(fs.readFileSync(path.join(ROOT, page), 'utf8'))) {
        n++;
        const [, cmd, ...args] = line.split(/\s+/);
        if (cmd === '--help' || cmd === '--version') continue; // the program's own options
        const opts = table.get(cmd);
        if (!opts) { bad.push(`${page}: ${line}: no command '${cmd}'`); continue; }
        for (const a of args) {
          const name = a.split('=')[0];
          if (/^--?[a-z]/.test(name) && !opts.has(name) && !(name.startsWith('--no-') && opts.has(name))) bad.push(`${page}: ${line}: '${cmd}' has no option ${name}`);
        }
      }
    }
    expect(bad).toEqual([]);
    expect(n).toBeGreaterThan(20);
  });

  it('the README\'s "On your own model" lines run as written, in order, on data under the names they use', () => {
    const readme = fs.readFileSync(path.join(ROOT, 'README.md'), 'utf8');
    const section = /## On your own model\n\n```\n([\s\S]*?)```/.exec(readme)![1].split('\n').filter(Boolean);
    const runs = section.filter((l) => l.startsWith('npx offramp '));
    expect(runs.length).toBeGreaterThanOrEqual(2);
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-readme-'));
    fs.copyFileSync(path.join(ROOT, 'models-demo/fan-monitor.onnx'), path.join(dir, 'model.onnx'));
    const calib = samples(600, 21), fresh = samples(200, 22);
    writeNpy(path.join(dir, 'calib-x.npy'), calib.x, [600, 1, BINS, FRAMES]);
    writeNpy(path.join(dir, 'calib-y.npy'), calib.y, [600]);
    writeNpy(path.join(dir, 'new-x.npy'), fresh.x, [200, 1, BINS, FRAMES]);
    writeNpy(path.join(dir, 'new-y.npy'), fresh.y, [200]);
    for (const l of runs) {
      const r = offramp(l.replace(/^npx offramp /, '').split(/\s+/), { cwd: dir });
      expect(r.code, `${l}\n${r.stderr}`).toBe(0);
    }
    expect(fs.existsSync(path.join(dir, 'out/report.html'))).toBe(true);
  });
});

// The build report as a person sees it: Debian's headless Chromium renders
// report.html, and the page's own layout says whether the charts are there and sized.
import { describe, it, expect } from 'vitest';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { offramp } from './helpers/cli.js';
import { samples, BINS, FRAMES } from '../scripts/demo-data.js';
import { writeNpy } from '../lib/data/npy.js';
import { bytes } from '../lib/report/units.js';

const CHROMIUM = '/usr/bin/chromium';
const have = fs.existsSync(CHROMIUM);
// Flags for a closed network and a root sandbox-less run (common practice for CI containers).
const FLAGS = ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking',
  '--disable-component-update', '--disable-sync', '--hide-scrollbars'];

function chromium(args: string[], profile: string) {
  return spawnSync(CHROMIUM, [...FLAGS, `--user-data-dir=${profile}`, ...args], { encoding: 'utf8', timeout: 60_000 });
}

/**
 * In the page: the pairs of text labels of one chart whose rendered boxes intersect (by more than half
 * a pixel each way), as the browser laid them out.
 */
const OVERLAPS = `((svg) => { const b = [...svg.querySelectorAll('text')].map((t) => [t.textContent, t.getBoundingClientRect()]); const o = [];
  for (let i = 0; i < b.length; i++) for (let j = i + 1; j < b.length; j++) { const p = b[i][1], q = b[j][1];
    if (p.left < q.right - 0.5 && q.left < p.right - 0.5 && p.top < q.bottom - 0.5 && q.top < p.bottom - 0.5) o.push([b[i][0], b[j][0]]); } return o; })`;

function probePage(dir: string, html: string, script: string, profile: string): unknown {
  const page = path.join(dir, `probe-${profile}.html`);
  fs.writeFileSync(page, fs.readFileSync(html, 'utf8').replace('</body>', `<script>document.body.setAttribute('data-probe', JSON.stringify(${script}));</script></body>`));
  const dom = chromium(['--dump-dom', `file://${page}`], path.join(dir, profile));
  const m = /data-probe="([^"]*)"/.exec(dom.stdout);
  expect(m, dom.stderr.slice(-500)).not.toBeNull();
  return JSON.parse(m![1].replace(/&quot;/g, '"').replace(/&amp;/g, '&').replace(/&lt;/g, '<').replace(/&gt;/g, '>'));
}

describe('report.html in a real browser', () => {
  it('an int8 build: the page describes the int8 chain (its stage files, figures and policy), and no two labels overlap', () => {
    if (!have) {
      if (process.env.CI) throw new Error(`${CHROMIUM} missing: apt-get install chromium`);
      return;
    }
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-browser8-'));
    const s = samples(300, 6);
    writeNpy(path.join(dir, 'x.npy'), s.x, [300, 1, BINS, FRAMES]);
    writeNpy(path.join(dir, 'y.npy'), s.y, [300]);
    const out = path.join(dir, 'out');
    const model = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
    const r = offramp(['build', model, '--data', path.join(dir, 'x.npy'), '--labels', path.join(dir, 'y.npy'), '--target', 'm4f', '--int8', '--max-drop', '20', '-o', out]);
    expect(r.code, r.stderr).toBe(0);
    const q = JSON.parse(fs.readFileSync(path.join(out, 'int8/manifest.json'), 'utf8')) as { stages: { file: string; weightBytes: number }[] };
    const page = probePage(dir, path.join(out, 'report.html'), `{
      chain: document.body.dataset.chain,
      files: [...document.querySelectorAll('table.stages tr')].slice(1).map((tr) => tr.children[1].textContent),
      weights: [...document.querySelectorAll('table.stages tr')].slice(1).map((tr) => tr.children[3].textContent),
      overlaps: [...document.querySelectorAll('svg')].map(${OVERLAPS}) }`, 'p8') as { chain: string; files: string[]; weights: string[]; overlaps: unknown[][] };
    expect(page.chain).toBe('int8');
    expect(page.files).toEqual(q.stages.map((st) => st.file));
    // the int8 files' own weights (bytes as the int8 manifest records them), not the float stage files'
    expect(page.weights).toEqual(q.stages.map((st) => bytes(st.weightBytes)));
    expect(page.overlaps).toHaveLength(3);
    for (const o of page.overlaps) expect(o).toEqual([]);
    // the tuning page of the same int8 chain: its charts' labels do not overlap either, and it says the promise in words
    const html = path.join(dir, 'tune.html');
    const t = offramp(['tune', path.join(out, 'int8'), '--data', path.join(dir, 'x.npy'), '--labels', path.join(dir, 'y.npy'), '--max-drop', '20', '--no-write', '--report', html]);
    expect(t.code, t.stderr).toBe(0);
    const tp = probePage(dir, html, `{ promise: document.querySelector('p.promise')?.textContent, overlaps: [...document.querySelectorAll('svg')].map(${OVERLAPS}) }`, 'pt') as { promise: string; overlaps: unknown[][] };
    expect(tp.promise).toMatch(/^(on new data like this, accuracy drops by at most 20 points against the full model|no promise: )/);
    expect(tp.overlaps).toHaveLength(3);
    for (const o of tp.overlaps) expect(o).toEqual([]);
  });

  it('renders three sized SVG charts and a screenshot', () => {
    if (!have) {
      if (process.env.CI) throw new Error(`${CHROMIUM} missing: apt-get install chromium`);
      return;
    }
    const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'offramp-browser-'));
    const s = samples(300, 5);
    writeNpy(path.join(dir, 'x.npy'), s.x, [300, 1, BINS, FRAMES]);
    writeNpy(path.join(dir, 'y.npy'), s.y, [300]);
    const out = path.join(dir, 'out');
    const model = path.resolve(import.meta.dirname, '../models-demo/fan-monitor.onnx');
    expect(offramp(['build', model, '--data', path.join(dir, 'x.npy'), '--labels', path.join(dir, 'y.npy'), '--target', 'm4f', '-o', out]).code).toBe(0);

    // A copy of the page with a probe that writes each chart's rendered box into the DOM.
    const probe = `<script>document.body.setAttribute('data-probe', JSON.stringify([...document.querySelectorAll('svg')].map((s) => {
      const r = s.getBoundingClientRect(); return { w: r.width, h: r.height, marks: s.querySelectorAll('rect,polyline,circle').length, overlaps: ${OVERLAPS}(s) }; })));</script>`;
    const page = path.join(out, 'probe.html');
    fs.writeFileSync(page, fs.readFileSync(path.join(out, 'report.html'), 'utf8').replace('</body>', `${probe}</body>`));
    const dom = chromium(['--dump-dom', `file://${page}`], path.join(dir, 'p1'));
    const m = /data-probe="([^"]*)"/.exec(dom.stdout);
    expect(m, dom.stderr.slice(-500)).not.toBeNull();
    const charts = JSON.parse(m![1].replace(/&quot;/g, '"')) as { w: number; h: number; marks: number }[];
    expect(charts).toHaveLength(3);
    for (const c of charts) {
      expect(c.overlaps).toEqual([]);
      expect(c.w).toBeGreaterThanOrEqual(600);
      expect(c.h).toBeGreaterThanOrEqual(250);
      expect(c.marks).toBeGreaterThanOrEqual(2);
    }

    const shot = path.join(dir, 'report.png');
    chromium([`--screenshot=${shot}`, '--window-size=1100,1800', `file://${path.join(out, 'report.html')}`], path.join(dir, 'p2'));
    const png = fs.readFileSync(shot);
    // PNG signature and IHDR width/height (PNG specification, ISO/IEC 15948).
    expect(png.subarray(1, 4).toString()).toBe('PNG');
    expect([png.readUInt32BE(16), png.readUInt32BE(20)]).toEqual([1100, 1800]);
    expect(png.length).toBeGreaterThan(20_000);
  });
});

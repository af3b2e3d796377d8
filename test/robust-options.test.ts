// Issue 11, group 5: every numeric option is parsed by one helper with a range; a bad value is a usage
// error (exit 2, one line naming the option) before any file is read or written. Before: `cost --batch 0`
// exited 1 with "dim NaN", `scan --top 200000` overflowed the stack, `tune --grid 1e9` ran for minutes,
// an empty `--max-drop=` read as 0 and `split --cuts ","` wrote a one-stage split.
import { describe, test, expect, beforeAll, afterAll } from 'vitest';
import fs from 'node:fs';
import path from 'node:path';
import { cli, makeFixture, oneLine, snapshot, type Fixture } from './helpers/robust.js';
import { parseNumber, parseDims, nameList } from '../lib/cli/common.js';
import { OfframpError } from '../lib/errors.js';

let f: Fixture;
beforeAll(async () => { f = await makeFixture('options'); }, 60_000);
afterAll(() => fs.rmSync(f.dir, { recursive: true, force: true }));

describe('bad option values are usage errors naming the option', () => {
  const o = (name: string) => path.join(f.dir, name);
  const cases: [string[], RegExp][] = [];
  for (const v of ['0', '-1', '1.5', 'abc', '', '1e400', '0x10']) cases.push([['cost', '<model>', '--batch', v], /--batch/]);
  cases.push(
    [['cost', '<model>', '--dim', 'batch=0'], /--dim batch/],
    [['cost', '<model>', '--dim', 'batch='], /--dim batch/],
    [['cost', '<model>', '--cuts', ','], /--cuts/],
    [['scan', '<model>', '--top', '200000'], /--top/],
    [['scan', '<model>', '--top', '0'], /--top/],
    [['scan', '<model>', '--batch', '-2'], /--batch/],
    [['tune', '<split>', '--data', '<x>', '--grid', '1e9'], /--grid/],
    [['tune', '<split>', '--data', '<x>', '--grid', '1'], /--grid/],
    [['tune', '<split>', '--data', '<x>', '--max-drop='], /--max-drop/],
    [['tune', '<split>', '--data', '<x>', '--max-drop', '101'], /--max-drop/],
    [['tune', '<split>', '--data', '<x>', '--held-out', '1'], /--held-out/],
    [['tune', '<split>', '--data', '<x>', '--policy', 'margin,'], /--policy/],
    [['split', '<grafted>', '--cuts', ',', '-o', '<out>'], /--cuts/],
    [['split', '<grafted>', '--cuts', 'a,,b', '-o', '<out>'], /--cuts/],
    [['split', '<grafted>', '--at', ',', '-o', '<out>'], /--at/],
    [['split', '<grafted>', '--at', '25%', '--batch', 'x', '-o', '<out>'], /--batch/],
    [['graft', '<model>', '--at', '10%', '--data', '<x>', '--held-out=', '-o', '<out>'], /--held-out/],
    [['graft', '<model>', '--at', '10%', '--data', '<x>', '--l2', '-1', '-o', '<out>'], /--l2/],
    [['graft', '<model>', '--at', '10%', '--data', '<x>', '--temperature', '0', '-o', '<out>'], /--temperature/],
    [['graft', '<model>', '--at', '10%', '--data', '<x>', '--seed', '-1', '-o', '<out>'], /--seed/],
    [['graft', '<model>', '--cuts', ',', '--data', '<x>', '-o', '<out>'], /--cuts/],
    [['build', '<model>', '--data', '<x>', '--max-drop=', '-o', '<out>'], /--max-drop/],
    [['build', '<model>', '--data', '<x>', '--candidates', '40', '--max-exits', '8', '-o', '<out>'], /sets of exits/],
    [['build', '<model>', '--data', '<x>', '--max-exits', '0', '-o', '<out>'], /--max-exits/],
    [['build', '<model>', '--data', '<x>', '--seed', '1.5', '-o', '<out>'], /--seed/],
    [['check', '<split>', '--against', '<grafted>', '--samples', '0'], /--samples/],
    [['check', '<split>', '--against', '<grafted>', '--rtol', '-1'], /--rtol/],
    [['check', '<split>', '--against', '<grafted>', '--seed', 'x'], /--seed/],
  );
  for (const [args, option] of cases) {
    test(args.filter((a) => !a.startsWith('<')).join(' ') || '(empty)', async () => {
      const subst: Record<string, string> = { '<model>': f.model, '<split>': f.split, '<x>': f.x, '<grafted>': f.grafted, '<out>': o('out') };
      const before = snapshot(f.dir);
      oneLine(await cli(args.map((a) => subst[a] ?? a)), 2, option);
      expect(snapshot(f.dir)).toEqual(before);
    });
  }
});

describe('the option parser', () => {
  const usage = (fn: () => unknown) => {
    try { fn(); } catch (e) { return e instanceof OfframpError && e.kind === 'usage' ? e.message : `not usage: ${e}`; }
    return 'accepted';
  };
  test('ranges, whole numbers and the empty string', () => {
    expect(parseNumber('3', '--n', { int: true, min: 1, max: 3 })).toBe(3);
    expect(parseNumber(' 2.5e-1 ', '--x', { min: 0 })).toBe(0.25);
    expect(usage(() => parseNumber('4', '--n', { int: true, min: 1, max: 3 }))).toBe("--n takes a whole number from 1 up to 3, not '4'");
    expect(usage(() => parseNumber('0', '--t', { min: 0, above: true }))).toBe("--t takes a number above 0, not '0'");
    expect(usage(() => parseNumber('1', '--h', { min: 0, max: 1, below: true }))).toMatch(/below 1/);
    for (const bad of ['', ' ', 'NaN', 'Infinity', '0x10', '1,5', '2^3', '9007199254740993']) expect(usage(() => parseNumber(bad, '--n', { int: true }))).toMatch(/^--n takes/);
  });
  test('dims and name lists', () => {
    expect(parseDims(['batch=4,seq=16'])).toEqual({ batch: 4, seq: 16 });
    expect(usage(() => parseDims(['=4']))).toMatch(/NAME=VALUE/);
    expect(usage(() => parseDims(['n=2147483648']))).toMatch(/--dim n/);
    expect(nameList(' a , b+c ', '--cuts')).toEqual(['a', 'b+c']);
    expect(usage(() => nameList('a,', '--cuts'))).toMatch(/no empty entries/);
  });
});

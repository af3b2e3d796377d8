// The ONNX backend conformance data from Debian's libonnx-testdata package.
// Under CI its absence is a failure, not a skip: the reference checks must run.
import fs from 'node:fs';
import path from 'node:path';

export const TESTDATA = process.env.OFFRAMP_TESTDATA ?? '/usr/share/libonnx-testdata/data';
export const haveTestdata = fs.existsSync(path.join(TESTDATA, 'node'));

export function requireTestdata(): boolean {
  if (haveTestdata) return true;
  if (process.env.CI) throw new Error(`ONNX conformance data missing at ${TESTDATA}: apt-get install libonnx-testdata`);
  return false;
}

export interface Case { name: string; dir: string; model: string }

export function cases(group: 'node' | 'pytorch-converted' | 'pytorch-operator' | 'simple' | 'real' | 'all'): Case[] {
  const groups = group === 'all' ? ['node', 'pytorch-converted', 'pytorch-operator', 'simple', 'real'] : [group];
  return groups.flatMap((g) => {
    const root = path.join(TESTDATA, g);
    if (!fs.existsSync(root)) return [];
    return fs.readdirSync(root).sort().map((name) => ({ name: `${g}/${name}`, dir: path.join(root, name), model: path.join(root, name, 'model.onnx') }))
      .filter((c) => fs.existsSync(c.model));
  });
}

/** test_data_set_0's files of a case, by kind. */
export function dataSet(c: Case, kind: 'input' | 'output', set = 0): string[] {
  const d = path.join(c.dir, `test_data_set_${set}`);
  if (!fs.existsSync(d)) return [];
  return fs.readdirSync(d).filter((f) => f.startsWith(`${kind}_`) && f.endsWith('.pb'))
    .sort((a, b) => parseInt(a.slice(kind.length + 1)) - parseInt(b.slice(kind.length + 1))).map((f) => path.join(d, f));
}

// Reference check: the ONNX backend conformance node tests (Debian libonnx-testdata,
// ONNX 1.12). For every node test whose ops all have a static rule, the inferred
// output shapes must equal the shapes of test_data_set_0/output_*.pb.
import { describe, it, expect } from 'vitest';
import { requireTestdata } from './helpers/testdata.js';
import { shapeCoverage } from '../scripts/shape-coverage.js';

describe('shape rules against the ONNX conformance node tests', () => {
  it('reproduce every expected output shape they claim', () => {
    if (!requireTestdata()) return;
    const rows = shapeCoverage();
    const count = (s: string) => rows.filter((r) => r.status === s).length;
    const covered = count('match') + count('mismatch') + count('unknown');
    console.log(`shape rule coverage: ${covered}/${rows.length} node tests have static rules for all their ops; ` +
      `${count('match')} match, ${count('unknown')} left to measurement, ${count('mismatch')} mismatch, ${count('error')} load errors`);
    const bad = rows.filter((r) => r.status === 'mismatch' || r.status === 'error');
    expect(bad.map((r) => `${r.name}: ${r.detail}`)).toEqual([]);
    expect(rows.length).toBeGreaterThan(900);
  });

  it('with the tests\' own inputs as known values, fold shape arithmetic to the expected shapes and values', () => {
    if (!requireTestdata()) return;
    const rows = shapeCoverage('', true);
    const count = (s: string) => rows.filter((r) => r.status === s).length;
    const folded = rows.reduce((a, r) => a + (r.folded ?? 0), 0);
    console.log(`with input values: ${count('match')} match, ${folded} folded output values equal the expected data, ${count('unknown')} still left to measurement`);
    expect(rows.filter((r) => r.status === 'mismatch' || r.status === 'error').map((r) => `${r.name}: ${r.detail}`)).toEqual([]);
    expect(folded).toBeGreaterThan(300);
  });
});

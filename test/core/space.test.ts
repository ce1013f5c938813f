import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { Rng } from '../../src/core/random.js';
import { DenseRows } from '../../src/core/rows.js';
import { columnMoments, parseSpace, prepareSpace } from '../../src/core/space.js';
import { defaultBackend } from '../helpers/backends.js';

let backend: ComputeBackend;
beforeAll(async () => {
  backend = await defaultBackend();
});
afterAll(async () => backend.dispose());

/** Independent normal columns with standard deviations 3, 2, 1, 0.5 around large offsets. */
function axisData(n: number): DenseRows {
  const rng = new Rng(4);
  const sd = [3, 2, 1, 0.5];
  const data = new Float32Array(n * 4);
  for (let i = 0; i < n; i++) for (let t = 0; t < 4; t++) data[i * 4 + t] = 1000 * (t + 1) + sd[t] * rng.normal();
  return new DenseRows(data, n, 4);
}

describe('selection spaces', () => {
  it('column moments streamed in blocks equal the two-pass values', () => {
    const rows = axisData(5003);
    const { mean, std } = columnMoments(rows, 700);
    for (let t = 0; t < 4; t++) {
      let m = 0;
      for (let i = 0; i < rows.rows; i++) m += rows.data[i * 4 + t] / rows.rows;
      let v = 0;
      for (let i = 0; i < rows.rows; i++) v += (rows.data[i * 4 + t] - m) ** 2 / rows.rows;
      expect(mean[t]).toBeCloseTo(m, 6);
      expect(std[t]).toBeCloseTo(Math.sqrt(v), 8);
    }
  });

  it('standardize gives centred unit-variance columns', async () => {
    const space = await prepareSpace(axisData(4000), parseSpace('standardize'), backend, new Rng(1));
    const { mean, std } = columnMoments(space.rows);
    // Rows are float32: values near 4,000 carry rounding of ~2.4e-4, which centring cannot undo.
    for (let t = 0; t < 4; t++) {
      expect(Math.abs(mean[t])).toBeLessThan(1e-3);
      expect(std[t]).toBeCloseTo(1, 4);
    }
  });

  it('pca:2 keeps the two widest axes with variance shares near 9/14.25 and 4/14.25', async () => {
    // Variances 9, 4, 1, 0.25 (derivation: shares of the total 14.25); sampling error at n = 20,000 is ~1%.
    const space = await prepareSpace(axisData(20_000), parseSpace('pca:2'), backend, new Rng(1));
    expect(space.rows.cols).toBe(2);
    const [r1, r2] = space.explainedVarianceRatio!;
    expect(Math.abs(r1 - 9 / 14.25)).toBeLessThan(0.02);
    expect(Math.abs(r2 - 4 / 14.25)).toBeLessThan(0.02);
    const { std } = columnMoments(space.rows);
    expect(std[0]).toBeCloseTo(3, 1);
    expect(std[1]).toBeCloseTo(2, 1);
  });

  it('rejects unknown spaces', () => {
    expect(() => parseSpace('pca:0')).toThrow(RangeError);
    expect(() => parseSpace('embedding')).toThrow(RangeError);
  });
});

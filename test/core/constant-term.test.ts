import quantile from '@stdlib/stats-base-dists-normal-quantile';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { constantTerm } from '../../src/core/discrepancy.js';
import { Rng } from '../../src/core/random.js';
import { DenseRows } from '../../src/core/rows.js';
import { defaultBackend } from '../helpers/backends.js';

let backend: ComputeBackend;
beforeAll(async () => {
  backend = await defaultBackend();
});
afterAll(async () => backend.dispose());

describe("the data's self term E h(|Y − Y'|)", () => {
  const n = 6000;
  // N(0,1) by its quantile grid; E|X − X'| = 2/√π for X, X' ~ N(0,1) independent (closed form).
  const rows = new DenseRows(Float32Array.from({ length: n }, (_, i) => quantile((i + 0.5) / n, 0, 1)), n, 1);
  const abs = { kind: 'energy', a: 0 } as const;

  it('over all pairs matches 2/√π for N(0,1), with zero standard error', async () => {
    const exact = await constantTerm(rows, backend, abs, new Rng(1));
    expect(exact.exact).toBe(true);
    expect(exact.standardError).toBe(0);
    // The grid's V-statistic differs from 2/√π by O(1/n) (diagonal and tails; own estimate ≤ 1e-3).
    expect(Math.abs(exact.value - 2 / Math.sqrt(Math.PI))).toBeLessThan(1e-3);
    // Row means are each row's data term: E|X − x| = x(2Φ(x) − 1) + 2φ(x) at the median row ≈ 2φ(0).
    expect(exact.rowMeans[n / 2]).toBeCloseTo(2 / Math.sqrt(2 * Math.PI), 3);
  });

  it('estimated from a sample lands within 4 of its standard errors of the exact value', async () => {
    const exact = await constantTerm(rows, backend, abs, new Rng(1));
    for (const seed of [1, 2, 3]) {
      const sampled = await constantTerm(rows, backend, abs, new Rng(seed), { exactMaxRows: 1000, sampleRows: 1500 });
      expect(sampled.exact).toBe(false);
      expect(sampled.sampleRows).toBe(1500);
      expect(sampled.standardError).toBeGreaterThan(0);
      expect(Math.abs(sampled.value - exact.value)).toBeLessThan(4 * sampled.standardError);
    }
  });
});

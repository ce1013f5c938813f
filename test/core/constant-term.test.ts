import quantile from '@stdlib/stats-base-dists-normal-quantile';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { constantTerm, controlledConstant } from '../../src/core/discrepancy.js';
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

describe('the sampled constant with the representatives as a control variate', () => {
  // Ten clusters of unequal size in 8-D: rows far from the big clusters have large row means, so
  // which rows a sample holds moves the plain estimate a lot (the case the correction is for).
  const n = 12_000;
  const d = 8;
  const rng = new Rng(7);
  const centres = Float64Array.from({ length: 10 * d }, () => 4 * rng.normal());
  const data = new Float32Array(n * d);
  for (let i = 0; i < n; i++) {
    const c = Math.min(9, Math.floor(10 * Math.pow(rng.next(), 2)));
    for (let t = 0; t < d; t++) data[i * d + t] = centres[c * d + t] + rng.normal();
  }
  const rows = new DenseRows(data, n, d);
  const kernel = { kind: 'energy', a: 0.05 } as const;

  it('stays unbiased, cuts the spread of the estimate, and reports a standard error that matches it', async () => {
    const exact = await constantTerm(rows, backend, kernel, new Rng(1));
    // Representatives: 40 rows spread by k-means++-like picks (any fixed set works; better sets cancel more).
    const picks = new Rng(3).sample(n, 40);
    const points = rows.gather(picks);
    const weights = new Float64Array(40).fill(1 / 40);
    const { dataTermMeans } = await import('../../src/core/discrepancy.js');
    const cFull = await dataTermMeans(rows, backend, kernel, points, 40);
    const plain: number[] = [];
    const controlled: number[] = [];
    const reportedSe: number[] = [];
    for (let seed = 1; seed <= 24; seed++) {
      const sampled = await constantTerm(rows, backend, kernel, new Rng(100 + seed), { exactMaxRows: 1000, sampleRows: 800 });
      const better = await controlledConstant(sampled, backend, kernel, points, 40, weights, cFull, n);
      expect(better.exact).toBe(false);
      plain.push(sampled.value - exact.value);
      controlled.push(better.value - exact.value);
      reportedSe.push(better.standardError);
    }
    const mean = (v: number[]) => v.reduce((a, b) => a + b, 0) / v.length;
    const sd = (v: number[]) => Math.sqrt(v.reduce((a, b) => a + (b - mean(v)) ** 2, 0) / (v.length - 1));
    // Unbiased: the mean error within 4 standard errors of the mean (24 independent samples).
    expect(Math.abs(mean(controlled))).toBeLessThan((4 * sd(controlled)) / Math.sqrt(24));
    // The correction removes most of the sample-composition error (own measurement: sd 0.137 → 0.029 here;
    // the bound leaves room for the estimate's own noise).
    expect(sd(controlled)).toBeLessThan(sd(plain) / 2);
    // The reported standard error describes the spread (first-order formula; within a factor 1.6).
    expect(mean(reportedSe) / sd(controlled)).toBeGreaterThan(1 / 1.6);
    expect(mean(reportedSe) / sd(controlled)).toBeLessThan(1.6);
  }, 60_000);

  it('returns an exact constant unchanged', async () => {
    const exact = await constantTerm(rows, backend, kernel, new Rng(1));
    const points = rows.gather([0, 1, 2]);
    const again = await controlledConstant(exact, backend, kernel, points, 3, [1 / 3, 1 / 3, 1 / 3], [1, 1, 1], n);
    expect(again).toEqual({ value: exact.value, exact: true, sampleRows: n, standardError: 0 });
  });
});

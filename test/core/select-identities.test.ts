import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { discrepancyBetween } from '../../src/core/discrepancy.js';
import { Rng } from '../../src/core/random.js';
import type { SelectionResult } from '../../src/core/result.js';
import { DenseRows } from '../../src/core/rows.js';
import { select } from '../../src/core/select.js';
import { defaultBackend } from '../helpers/backends.js';

let backend: ComputeBackend;
beforeAll(async () => {
  backend = await defaultBackend();
});
afterAll(async () => {
  await backend.dispose();
});

/** Five anisotropic blobs of different sizes in 6-D. */
function blobs(n: number, seed: number): DenseRows {
  const rng = new Rng(seed);
  const d = 6;
  const data = new Float32Array(n * d);
  for (let i = 0; i < n; i++) {
    const c = i % 7 < 3 ? 0 : (i % 7) - 2; // blob 0 holds 3/7 of the rows
    for (let t = 0; t < d; t++) data[i * d + t] = (t === c % d ? 8 : 0) + (c === 4 && t === 1 ? -8 : 0) + (1 + t / 3) * rng.normal();
  }
  return new DenseRows(data, n, d);
}

function checkIdentities(r: SelectionResult, n: number): void {
  const w = r.representatives.map((p) => p.weight);
  expect(Math.min(...w)).toBeGreaterThanOrEqual(0);
  expect(w.reduce((a, b) => a + b, 0)).toBeCloseTo(1, 9);
  expect(r.representatives.map((p) => p.share).reduce((a, b) => a + b, 0)).toBeCloseTo(1, 9);
  expect(r.representatives.map((p) => p.count).reduce((a, b) => a + b, 0)).toBe(n);
  expect(new Set(r.representatives.map((p) => p.index)).size).toBe(r.k);
  expect(r.representatives.map((p) => p.rank)).toEqual(Array.from({ length: r.k }, (_, i) => i + 1));
  expect(r.discrepancy.value).toBeGreaterThanOrEqual(-1e-6 * r.scale);
  for (const v of r.discrepancy.random.draws) expect(v).toBeGreaterThanOrEqual(-1e-6 * r.scale);
  const worst = r.coverage.worstCovered.map((x) => x.distance);
  expect(worst).toEqual([...worst].sort((a, b) => b - a));
  expect(r.coverage.maxDistance).toBeCloseTo(worst[0], 5);
  const fractions = r.coverage.coveredWithin.map((c) => c.fraction);
  expect(fractions).toEqual([...fractions].sort((a, b) => a - b));
}

describe('selection identities', () => {
  const n = 3000;
  const rows = blobs(n, 1);

  it('weights are on the simplex, shares and counts add up, D² ≥ 0, items are distinct', async () => {
    for (const weights of ['uniform', 'optimized'] as const) {
      const r = await select(rows, { k: 12, seed: 4, weights, maxIterations: 300 }, { backend });
      checkIdentities(r, n);
      if (weights === 'uniform') for (const p of r.representatives) expect(p.weight).toBeCloseTo(1 / 12, 12);
    }
  });

  it('the same seed gives the same result; another seed gives another run', async () => {
    const a = await select(rows, { k: 8, seed: 9, maxIterations: 200 }, { backend });
    const b = await select(rows, { k: 8, seed: 9, maxIterations: 200 }, { backend });
    const c = await select(rows, { k: 8, seed: 10, maxIterations: 200 }, { backend });
    const strip = (r: SelectionResult) => ({ ...r, trace: { ...r.trace, seconds: {} } });
    expect(strip(b)).toEqual(strip(a));
    expect(c.discrepancy.stages.seeded).not.toBe(a.discrepancy.stages.seeded);
  });

  it('transforming scratch rows in place gives the same result as working on a copy', async () => {
    const strip = (r: SelectionResult) => ({ ...r, trace: { ...r.trace, seconds: {} } });
    for (const space of ['raw', 'standardize']) {
      const onCopy = await select(rows, { k: 6, seed: 2, maxIterations: 100, space }, { backend });
      const scratch = new DenseRows(Float32Array.from(rows.data), n, 6);
      const inPlace = await select(scratch, { k: 6, seed: 2, maxIterations: 100, space }, { backend, sourceIsScratch: true });
      expect(strip(inPlace)).toEqual(strip(onCopy));
      expect(scratch.data).not.toEqual(rows.data); // it was used as scratch
    }
  });

  it('reported D² equals an independent evaluation of the weighted representatives', async () => {
    const r = await select(rows, { k: 10, seed: 2, maxIterations: 200 }, { backend });
    const reps = rows.gather(r.representatives.map((p) => p.index));
    const kernel = r.kernel.kind === 'energy' ? { kind: 'energy' as const, a: r.kernel.a } : { kind: 'gaussian' as const, sigma: r.kernel.sigma };
    // discrepancyBetween forms the full N×N matrix on the reference path: fine at N = 3000.
    const value = await discrepancyBetween(backend, kernel, reps, 10, rows.data, n, 6, r.representatives.map((p) => p.weight));
    expect(r.discrepancy.value).toBeCloseTo(value, 4);
  });

  it('refinement never raises D², and the result beats random k-subsets', async () => {
    const r = await select(rows, { k: 15, seed: 3, maxIterations: 300, weights: 'uniform' }, { backend });
    expect(r.discrepancy.stages.refined).toBeLessThanOrEqual(r.discrepancy.stages.snapped + 1e-9);
    expect(r.discrepancy.ratioToRandom).toBeLessThan(0.5);
    // Prefix curve: full prefix with uniform weights is the uniform D² of the set; curve under random.
    expect(r.discrepancy.prefix.at(-1)!.value).toBeCloseTo(r.discrepancy.value, 6);
    const below = r.discrepancy.prefix.filter((p) => p.value <= p.random).length;
    expect(below).toBe(r.k);
  });

  it('k = 1 picks a medoid-like centre item and k = N takes every row', async () => {
    const small = blobs(40, 5);
    const one = await select(small, { k: 1, seed: 1, maxIterations: 100 }, { backend });
    expect(one.representatives[0].weight).toBe(1);
    expect(one.representatives[0].share).toBe(1);
    const all = await select(small, { k: 40, seed: 1, maxIterations: 50 }, { backend });
    expect(new Set(all.representatives.map((p) => p.index)).size).toBe(40);
    checkIdentities(all, 40);
    // Every row is its own representative: D² is 0 with weights 1/N (up to float32 rounding).
    expect(Math.abs(all.discrepancy.value)).toBeLessThan(1e-4 * all.scale);
  });

  it('identical rows: D² is 0, the ratio to random is null and the degenerate scale is reported', async () => {
    const same = new DenseRows(new Float32Array(50 * 3).fill(2.5), 50, 3);
    const r = await select(same, { k: 4, seed: 1, maxIterations: 50 }, { backend });
    expect(r.discrepancy.value).toBe(0);
    expect(r.discrepancy.ratioToRandom).toBeNull();
    expect(r.trace.scaleDegenerate).toBe(true);
    expect(r.representatives.reduce((a, b) => a + b.weight, 0)).toBeCloseTo(1, 9);
    expect(new Set(r.representatives.map((p) => p.index)).size).toBe(4);
  });

  it('rejects k larger than the dataset and bad options with catalogued codes', async () => {
    await expect(select(blobs(5, 1), { k: 6 }, { backend })).rejects.toMatchObject({ code: 'K_TOO_LARGE' });
    await expect(select(rows, { k: 0 }, { backend })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    await expect(select(rows, { k: 3, space: 'pca:0' }, { backend })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
  });

  it('runs with the Gaussian kernel, momentum SGD, standardized and PCA spaces', async () => {
    const g = await select(rows, { k: 10, seed: 1, kernel: 'gaussian', maxIterations: 200 }, { backend });
    checkIdentities(g, n);
    expect(g.kernel.kind).toBe('gaussian');
    expect(g.discrepancy.ratioToRandom).toBeLessThan(1);
    const sgd = await select(rows, { k: 10, seed: 1, optimizer: 'sgd', maxIterations: 200 }, { backend });
    checkIdentities(sgd, n);
    expect(sgd.discrepancy.ratioToRandom).toBeLessThan(1);
    const std = await select(rows, { k: 10, seed: 1, space: 'standardize', maxIterations: 200 }, { backend });
    checkIdentities(std, n);
    const pca = await select(rows, { k: 10, seed: 1, space: 'pca:3', maxIterations: 200 }, { backend });
    checkIdentities(pca, n);
    expect(pca.dims).toBe(3);
    const ratios = pca.trace.explainedVarianceRatio!;
    expect(ratios).toEqual([...ratios].sort((a, b) => b - a));
    expect(ratios.reduce((a, b) => a + b, 0)).toBeLessThanOrEqual(1 + 1e-6);
  });

  it('above exactConstantMaxRows the self term is sampled, its standard error reported, and the rest holds', async () => {
    const big = blobs(30_000, 7);
    const r = await select(big, { k: 12, seed: 5, maxIterations: 200, exactConstantMaxRows: 20_000 }, { backend });
    expect(r.discrepancy.constant.exact).toBe(false);
    expect(r.discrepancy.constant.standardError).toBeGreaterThan(0);
    checkIdentities(r, 30_000);
    expect(r.discrepancy.ratioToRandom).toBeLessThan(0.5);
  });

  it('stops on the time budget and reports it', async () => {
    const r = await select(rows, { k: 10, seed: 1, maxIterations: 1_000_000, timeBudgetSeconds: 0.5, plateauTolerance: 0 }, { backend });
    expect(r.trace.stopReason).toBe('time');
    checkIdentities(r, n);
  });

  it('reports progress through every phase, ending at 1', async () => {
    const phases: string[] = [];
    let last = 0;
    let monotone = true;
    await select(rows, { k: 5, seed: 1, maxIterations: 100 }, {
      backend,
      onProgress: (p) => {
        if (p.fraction < last - 1e-12) monotone = false;
        last = p.fraction;
        if (phases.at(-1) !== p.phase) phases.push(p.phase);
      },
    });
    expect(phases).toEqual(['prepare', 'scale', 'seed', 'descent', 'snap', 'refine', 'coverage', 'baseline', 'done']);
    expect(monotone).toBe(true);
    expect(last).toBe(1);
  });

  it('stops when cancelled with SELECTION_CANCELLED', async () => {
    const controller = new AbortController();
    const p = select(rows, { k: 5, seed: 1, maxIterations: 100_000 }, {
      backend,
      signal: controller.signal,
      onProgress: (q) => {
        if (q.phase === 'descent' && (q.iteration ?? 0) > 20) controller.abort();
      },
    });
    await expect(p).rejects.toMatchObject({ code: 'SELECTION_CANCELLED' });
  });
});

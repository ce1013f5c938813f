import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import type { KernelSpec } from '../../src/compute/kernel-spec.js';
import { ReferenceBackend } from '../../src/compute/reference-backend.js';
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

const kernelOf = (r: SelectionResult): KernelSpec => (r.kernel.kind === 'energy' ? { kind: 'energy', a: r.kernel.a } : { kind: 'gaussian', sigma: r.kernel.sigma });

/**
 * Four Gaussian clusters (sd 1) at ±6·e₀ and ±6·e₁ in 4-D, as pairs (x, −x) on a 2⁻¹⁰ grid: every
 * partial column sum is exact in float64, so the column means are exactly 0 and the raw space's
 * centring changes no bit — the selection space is the source space. With n = 150 every kernel
 * call (n²·d < 1e5, the ONNX backend's minWork) runs on the float64 reference path.
 */
function symmetricClusters(pairs: number, seed: number): DenseRows {
  const rng = new Rng(seed);
  const d = 4;
  const data = new Float32Array(2 * pairs * d);
  for (let i = 0; i < pairs; i++) {
    const axis = i % 2;
    for (let t = 0; t < d; t++) {
      const v = Math.round(((t === axis ? 6 : 0) + rng.normal()) * 1024) / 1024;
      data[2 * i * d + t] = v;
      data[(2 * i + 1) * d + t] = -v;
    }
  }
  return new DenseRows(data, 2 * pairs, d);
}

/** Four well-separated clusters (sd 1) centred at 10·e_c, c = 0..3, in 5-D; row i is in cluster i mod 4. */
function fourClusters(n: number, seed: number): { rows: DenseRows; centres: Float32Array } {
  const rng = new Rng(seed);
  const d = 5;
  const centres = new Float32Array(4 * d);
  for (let c = 0; c < 4; c++) centres[c * d + c] = 10;
  const data = new Float32Array(n * d);
  for (let i = 0; i < n; i++) for (let t = 0; t < d; t++) data[i * d + t] = centres[(i % 4) * d + t] + rng.normal();
  return { rows: new DenseRows(data, n, d), centres };
}

function nearestRow(rows: DenseRows, v: Float32Array, among: (i: number) => boolean): number {
  let best = -1;
  let bestD = Infinity;
  for (let i = 0; i < rows.rows; i++) {
    if (!among(i)) continue;
    let s = 0;
    for (let t = 0; t < rows.cols; t++) s += (rows.data[i * rows.cols + t] - v[t]) ** 2;
    if (s < bestD) [best, bestD] = [i, s];
  }
  return best;
}

function checkFixedIdentities(r: SelectionResult, n: number, fixedRows: number[]): void {
  const fixed = r.fixed!;
  expect(fixed.map((x) => x.position)).toEqual(fixedRows.map((_, i) => i));
  expect(fixed.map((x) => x.index)).toEqual(fixedRows.map((row) => (row >= 0 ? row : null)));
  const indices = r.representatives.map((p) => p.index);
  expect(new Set(indices).size).toBe(r.k);
  for (const i of indices) expect(fixedRows).not.toContain(i);
  expect(r.representatives.map((p) => p.rank)).toEqual(Array.from({ length: r.k }, (_, i) => i + 1));
  const all = [...r.representatives, ...fixed];
  expect(Math.min(...all.map((p) => p.weight))).toBeGreaterThanOrEqual(0);
  expect(all.reduce((a, p) => a + p.weight, 0)).toBeCloseTo(1, 9);
  expect(all.reduce((a, p) => a + p.share, 0)).toBeCloseTo(1, 9);
  expect(all.reduce((a, p) => a + p.count, 0)).toBe(n);
  const gain = r.coverageGain!;
  expect(gain.gain).toBeGreaterThanOrEqual(0);
  expect(gain.withNew).toBe(r.discrepancy.value);
  expect(gain.gain).toBeCloseTo(gain.fixedOnly - gain.withNew, 12);
  expect(r.discrepancy.prefix).toHaveLength(r.k);
  for (const w of r.coverage.worstCovered) {
    if (w.nearestRank === 0) expect(w.nearestFixed).toBeGreaterThanOrEqual(0);
    else expect(w.nearestFixed).toBeUndefined();
    expect(w.nearestFixed ?? 0).toBeLessThan(fixedRows.length);
    expect(w.nearestRank).toBeLessThanOrEqual(r.k);
  }
  expect(r.coverage.worstCovered.some((w) => w.nearestRank === 0)).toBe(true);
}

describe('fixed items', () => {
  const rows = symmetricClusters(75, 3);
  const n = rows.rows;
  const d = rows.cols;
  // Two fixed items are rows of the dataset, one comes from elsewhere (on the same grid).
  const fixedRows = [4, 17, -1];
  const outside = Float32Array.of(0, 0, 6, 0);
  const fixedVectors = new Float32Array(3 * d);
  fixedVectors.set(rows.gather([4, 17]));
  fixedVectors.set(outside, 2 * d);

  it.each(['optimized', 'uniform'] as const)(
    'weights %s: fixed items reported and unmoved, k new distinct non-fixed items, weights on the simplex over fixed + new, withNew = independent D² within 1e-9',
    async (weights) => {
      const vectorsCopy = Float32Array.from(fixedVectors);
      const r = await select(rows, { k: 4, seed: 2, weights, maxIterations: 150 }, { backend, fixed: { vectors: fixedVectors, rows: Int32Array.from(fixedRows) } });
      expect(fixedVectors).toEqual(vectorsCopy); // the caller's vectors are not modified
      checkFixedIdentities(r, n, fixedRows);
      if (weights === 'uniform') for (const p of [...r.representatives, ...r.fixed!]) expect(p.weight).toBeCloseTo(1 / 7, 12);
      // Independent evaluation (own derivation: D² of the weighted set fixed + new against the data,
      // all three terms in float64 by the reference backend), at the caller's fixed vectors: an item
      // moved, snapped or swapped out would change it.
      const set = new Float32Array(7 * d);
      set.set(rows.gather(r.representatives.map((p) => p.index)));
      set.set(fixedVectors, 4 * d);
      const w = [...r.representatives, ...r.fixed!].map((p) => p.weight);
      const independent = await discrepancyBetween(new ReferenceBackend(), kernelOf(r), set, 7, rows.data, n, d, w);
      expect(Math.abs(r.coverageGain!.withNew - independent)).toBeLessThanOrEqual(1e-9 * independent);
      // The fixed items alone with their best (or uniform) weights can only be worse.
      const fixedUniform = await discrepancyBetween(new ReferenceBackend(), kernelOf(r), fixedVectors, 3, rows.data, n, d);
      if (weights === 'uniform') expect(Math.abs(r.coverageGain!.fixedOnly - fixedUniform)).toBeLessThanOrEqual(1e-9 * fixedUniform);
      else expect(r.coverageGain!.fixedOnly).toBeLessThanOrEqual(fixedUniform * (1 + 1e-9));
      expect(r.coverageGain!.gain).toBeGreaterThan(0);
    },
  );

  it('an item nearest a fixed item is covered by it: the fixed rows themselves are at distance 0 in raw, standardize and pca spaces', async () => {
    for (const space of ['raw', 'standardize', 'pca:3']) {
      let rank: Int32Array | null = null;
      let dist: Float32Array | null = null;
      const r = await select(rows, { k: 4, seed: 1, space, maxIterations: 100 }, {
        backend,
        fixed: { vectors: fixedVectors, rows: Int32Array.from(fixedRows) },
        onAssignments: (a, b) => void ((rank = a), (dist = b)),
      });
      checkFixedIdentities(r, n, fixedRows);
      // Were the fixed vectors not put through the space's transform, they would sit far from their rows.
      expect(rank![4]).toBe(-1);
      expect(rank![17]).toBe(-2);
      expect(dist![4]).toBeLessThan(1e-5 * r.scale);
      expect(dist![17]).toBeLessThan(1e-5 * r.scale);
      const counts = [...r.representatives, ...r.fixed!].map((p) => p.count);
      expect(counts.reduce((a, b) => a + b, 0)).toBe(n);
    }
  });

  describe('with fixed items in 3 of 4 well-separated clusters, the first new item goes to the 4th', () => {
    const { rows: data, centres } = fourClusters(2000, 5);
    const inCluster = (row: number, c: number) => row % 4 === c;

    it.each([
      ['rows of the dataset', true],
      ['vectors from another dataset (rows −1)', false],
    ] as const)('fixed items are %s', async (_, asRows) => {
      for (const uncovered of [3, 1]) {
        const covered = [0, 1, 2, 3].filter((c) => c !== uncovered);
        const rowIdx = covered.map((c) => nearestRow(data, centres.subarray(c * 5, c * 5 + 5), (i) => inCluster(i, c)));
        const vectors = asRows ? data.gather(rowIdx) : Float32Array.from(covered.flatMap((c) => Array.from(centres.subarray(c * 5, c * 5 + 5))));
        const fixed = { vectors, rows: asRows ? Int32Array.from(rowIdx) : undefined };
        let rank: Int32Array | null = null;
        const r = await select(data, { k: 4, seed: 7, maxIterations: 200 }, { backend, fixed, onAssignments: (a) => void (rank = a) });
        checkFixedIdentities(r, 2000, asRows ? rowIdx : [-1, -1, -1]);
        expect(inCluster(r.representatives[0].index, uncovered)).toBe(true);
        // The prefix curve evaluates each prefix with the fixed items: its first value already
        // covers all four clusters, so it is below the fixed items alone.
        expect(r.discrepancy.prefix[0].value).toBeLessThan(r.coverageGain!.fixedOnly);
        // Every row of the uncovered cluster is nearest a new item; every fixed item covers rows.
        for (let i = uncovered; i < 2000; i += 4) expect(rank![i]).toBeGreaterThan(0);
        for (const x of r.fixed!) expect(x.count).toBeGreaterThan(0);
        expect(r.discrepancy.ratioToRandom).toBeLessThan(1);
      }
    });
  });

  it('a point started exactly on a fixed row snaps to another row: fixed rows are never new items', async () => {
    // The symmetric data's selection space is the source space, so row 4 is also a valid start there.
    for (const refine of [false, true]) {
      const r = await select(rows, { k: 1, seed: 1, maxIterations: 0, refine }, { backend, fixed: { vectors: rows.gather([4]), rows: Int32Array.of(4) }, initialPoints: rows.gather([4]) });
      expect(r.representatives[0].index).not.toBe(4);
      expect(r.fixed![0].index).toBe(4);
    }
  });

  it('with no fixed items (or an empty set) the result says null and equals a run without them', async () => {
    const plain = await select(rows, { k: 3, seed: 4, maxIterations: 80 }, { backend });
    const empty = await select(rows, { k: 3, seed: 4, maxIterations: 80 }, { backend, fixed: { vectors: new Float32Array(0) } });
    const strip = (r: SelectionResult) => ({ ...r, trace: { ...r.trace, seconds: {} } });
    expect(strip(empty)).toEqual(strip(plain));
    expect(plain.fixed).toBeNull();
    expect(plain.coverageGain).toBeNull();
    expect(plain.stability).toBeNull();
  });

  it('rejects malformed fixed items and a k that the non-fixed rows cannot supply', async () => {
    const small = symmetricClusters(3, 1); // 6 rows
    const v = (count: number) => new Float32Array(count * 4);
    await expect(select(small, { k: 2 }, { backend, fixed: { vectors: new Float32Array(5) } })).rejects.toMatchObject({ code: 'DIMENSION_MISMATCH' });
    await expect(select(small, { k: 2 }, { backend, fixed: { vectors: v(2), rows: Int32Array.of(1) } })).rejects.toMatchObject({ code: 'DIMENSION_MISMATCH' });
    await expect(select(small, { k: 2 }, { backend, fixed: { vectors: v(1), rows: Int32Array.of(6) } })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    await expect(select(small, { k: 2 }, { backend, fixed: { vectors: v(2), rows: Int32Array.of(1, 1) } })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    await expect(select(small, { k: 2 }, { backend, fixed: { vectors: Float32Array.of(0, 0, NaN, 0) } })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    await expect(select(small, { k: 4 }, { backend, fixed: { vectors: v(3), rows: Int32Array.of(0, 1, 2) } })).rejects.toMatchObject({ code: 'K_TOO_LARGE' });
    // k = n − (fixed rows) is fine: every other row is chosen.
    const r = await select(small, { k: 3, maxIterations: 20 }, { backend, fixed: { vectors: small.gather([0, 1, 2]), rows: Int32Array.of(0, 1, 2) } });
    expect(r.representatives.map((p) => p.index).sort()).toEqual([3, 4, 5]);
  });
});

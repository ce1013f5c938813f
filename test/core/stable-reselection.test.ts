import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { DEFAULT_STABILITY_STRENGTH } from '../../src/core/given-items.js';
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

/**
 * The product's two re-selection scenarios on a mixture of 8 Gaussians (sd 1, centres 4·N(0, I),
 * unequal shares) in 8-D: v1 has 4000 rows; v2 = v1 + 200 rows (5%) from the same mixture; v3 =
 * v1 + 400 rows (10%) of a new cluster at 14·(1, …, 1), far from every old centre. Old items keep
 * their rows, so the caller's id matching is the identity on rows 0..3999.
 */
const d = 8;
const n1 = 4000;
const k = 16;
const centres = (() => {
  const rng = new Rng(11);
  return Float64Array.from({ length: 8 * d }, () => 4 * rng.normal());
})();
const shares = [0.2, 0.15, 0.15, 0.1, 0.1, 0.1, 0.1, 0.1];

function mixture(n: number, rng: Rng): Float32Array {
  const out = new Float32Array(n * d);
  for (let i = 0; i < n; i++) {
    let u = rng.next();
    let g = 0;
    while (g < 7 && u >= shares[g]) u -= shares[g++];
    for (let t = 0; t < d; t++) out[i * d + t] = centres[g * d + t] + rng.normal();
  }
  return out;
}

function appended(base: Float32Array, extra: Float32Array): DenseRows {
  const data = new Float32Array(base.length + extra.length);
  data.set(base);
  data.set(extra, base.length);
  return new DenseRows(data, data.length / d, d);
}

const v1Data = mixture(n1, new Rng(1));
const v1 = new DenseRows(v1Data, n1, d);
const v2 = appended(v1Data, mixture(200, new Rng(2)));
const v3 = (() => {
  const rng = new Rng(3);
  return appended(v1Data, Float32Array.from({ length: 400 * d }, () => 14 + rng.normal()));
})();
const options = { k, seed: 1 };

let v1Result: Promise<SelectionResult> | null = null;
/** v1's selection, as the earlier result: representatives in rank order, their rows and vectors. */
async function previousOf(strength?: number, take = k): Promise<{ vectors: Float32Array; rows: Int32Array; strength?: number }> {
  v1Result ??= select(v1, options, { backend });
  const r = await v1Result;
  const rows = Int32Array.from(r.representatives.slice(0, take).map((p) => p.index));
  return { vectors: v1.gather(rows), rows, strength };
}

/** Fraction of v3's new-cluster rows (4000..4399) whose nearest representative is itself a new-cluster item. */
async function newClusterCoverage(strength?: number): Promise<{ share: number; result: SelectionResult }> {
  let rank: Int32Array | null = null;
  const result = await select(v3, options, { backend, previous: await previousOf(strength), onAssignments: (a) => void (rank = a) });
  let covered = 0;
  for (let i = n1; i < v3.rows; i++) if (rank![i] > 0 && result.representatives[rank![i] - 1].index >= n1) covered++;
  return { share: covered / 400, result };
}

describe('stable re-selection', () => {
  it(`(a) v2 = v1 + 5% same-distribution items, default strength ${DEFAULT_STABILITY_STRENGTH}: keeps ≥ 80% of the 16 (measured 16/16) at D² ≤ 1.10 × an unconstrained run (measured 1.004)`, async () => {
    const plain = await select(v2, options, { backend });
    const stable = await select(v2, options, { backend, previous: await previousOf() });
    const st = stable.stability!;
    expect(st).toMatchObject({ previous: k, strength: DEFAULT_STABILITY_STRENGTH });
    expect(st.kept + st.replaced).toBe(k);
    expect(st.added).toBe(k - st.kept);
    const prev = await previousOf();
    expect(stable.representatives.filter((p) => prev.rows.includes(p.index)).length).toBe(st.kept);
    expect(st.kept / k).toBeGreaterThanOrEqual(0.8);
    expect(stable.discrepancy.value).toBeLessThanOrEqual(1.1 * plain.discrepancy.value);
    // The unconstrained run, for contrast, keeps few of them (measured 1): the same data, another basin.
    expect(plain.stability).toBeNull();
  });

  it('(a) the threshold is what keeps them: at strength 0 (a plain warm start) fewer are kept (measured 12/16 vs 16/16)', async () => {
    const warm = await select(v2, options, { backend, previous: await previousOf(0) });
    const stable = await select(v2, options, { backend, previous: await previousOf() });
    expect(warm.stability!.strength).toBe(0);
    expect(warm.stability!.kept).toBeLessThan(stable.stability!.kept);
  });

  it(`(b) v3 = v1 + a new well-separated cluster of 10%, default strength: the new cluster gets its own representative (measured share 1.0, 15/16 kept)`, async () => {
    const { share, result } = await newClusterCoverage();
    expect(share).toBeGreaterThan(0.5);
    expect(result.stability!.kept).toBeGreaterThanOrEqual(12);
  });

  it('(b) strength = k makes the threshold τ = λ·D²₀/k equal to the warm start D²₀, more than any swap can gain: nothing is replaced, the new cluster stays uncovered', async () => {
    const { share, result } = await newClusterCoverage(k);
    expect(result.stability!.kept).toBe(k);
    expect(share).toBe(0);
  });

  it('fewer earlier items than k (k-means++ completes them; measured 9/10 kept), more (k = 12: the first 12 count; measured 8 kept, D² 1.014 × unconstrained), and deleted ones (4 rows −1; measured 12/12 kept)', async () => {
    const fewer = await select(v2, options, { backend, previous: await previousOf(undefined, 10) });
    expect(fewer.stability!.previous).toBe(10);
    expect(fewer.stability!.kept).toBeGreaterThanOrEqual(8);
    expect(fewer.stability!.added).toBe(k - fewer.stability!.kept);
    expect(new Set(fewer.representatives.map((p) => p.index)).size).toBe(k);

    // A 12-prefix of a 16-ranking under-covers some clusters: replacing a few pays more than τ.
    const more = await select(v2, { ...options, k: 12 }, { backend, previous: await previousOf() });
    const plain12 = await select(v2, { ...options, k: 12 }, { backend });
    expect(more.stability!.previous).toBe(k);
    expect(more.stability!.kept).toBeGreaterThanOrEqual(6);
    expect(more.stability!.kept).toBeLessThanOrEqual(12);
    expect(more.stability!.replaced).toBe(k - more.stability!.kept);
    expect(more.discrepancy.value).toBeLessThanOrEqual(1.1 * plain12.discrepancy.value);

    const prev = await previousOf();
    const deleted = Int32Array.from(prev.rows, (r, j) => (j % 4 === 0 ? -1 : r));
    const gone = await select(v2, options, { backend, previous: { vectors: prev.vectors, rows: deleted } });
    const chosen = new Set(gone.representatives.map((p) => p.index));
    expect(gone.stability!.kept).toBe(Array.from(deleted).filter((r) => r >= 0 && chosen.has(r)).length);
    expect(gone.stability!.kept).toBeGreaterThanOrEqual(10);
    expect(gone.stability!.kept).toBeLessThanOrEqual(12);
  });

  it('with fixed items as well: an earlier item that is now fixed is not counted, and no new item is a fixed row', async () => {
    const prev = await previousOf();
    const fixedRows = Int32Array.of(prev.rows[0], prev.rows[1]);
    const r = await select(v2, options, { backend, previous: prev, fixed: { vectors: v2.gather(fixedRows), rows: fixedRows } });
    expect(r.stability!.previous).toBe(k - 2);
    expect(r.fixed!.map((x) => x.index)).toEqual(Array.from(fixedRows));
    for (const p of r.representatives) expect(Array.from(fixedRows)).not.toContain(p.index);
    expect(r.stability!.kept / (k - 2)).toBeGreaterThanOrEqual(0.8);
  });

  it('rejects a bad strength, mismatched rows, and two warm starts', async () => {
    const prev = await previousOf();
    await expect(select(v2, options, { backend, previous: { ...prev, strength: -1 } })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    await expect(select(v2, options, { backend, previous: { ...prev, strength: NaN } })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    await expect(select(v2, options, { backend, previous: { ...prev, rows: prev.rows.subarray(1) } })).rejects.toMatchObject({ code: 'DIMENSION_MISMATCH' });
    await expect(select(v2, options, { backend, previous: prev, initialPoints: new Float32Array(k * d) })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
  });
});

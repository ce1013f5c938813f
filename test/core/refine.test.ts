import { describe, expect, it } from 'vitest';
import { kernelAtZero, type KernelSpec } from '../../src/compute/kernel-spec.js';
import { ReferenceBackend } from '../../src/compute/reference-backend.js';
import { greedyForward } from '../../src/core/greedy.js';
import { KernelColumns } from '../../src/core/kernel-columns.js';
import { Rng } from '../../src/core/random.js';
import { refineBySwaps, type RefineInput } from '../../src/core/refine.js';
import { solveWeights } from '../../src/core/weights.js';

const backend = new ReferenceBackend();

/** Candidates in clusters and the data they stand for; c[u] = mean over the data of h(|pool_u − y|). */
async function problem(seed: number, P: number, d: number, kernel: KernelSpec) {
  const rng = new Rng(seed);
  const centres = Array.from({ length: 6 }, () => Array.from({ length: d }, () => 4 * rng.normal()));
  const draw = (n: number) => {
    const out = new Float32Array(n * d);
    for (let i = 0; i < n; i++) {
      const centre = centres[Math.floor(rng.next() * centres.length)];
      for (let t = 0; t < d; t++) out[i * d + t] = centre[t] + rng.normal();
    }
    return out;
  };
  const pool = draw(P);
  const data = draw(300);
  const K = await backend.kernelMatrix(pool, P, data, 300, d, kernel);
  const c = new Float64Array(P);
  for (let u = 0; u < P; u++) for (let y = 0; y < 300; y++) c[u] += K[u * 300 + y] / 300;
  return { pool, c, rng };
}

/**
 * The search the bounds must reproduce: every (slot, candidate) pair scored each step, the lowest
 * Δ taken (ties: lowest slot, then lowest candidate).
 */
async function bruteForce(columns: KernelColumns, kernel: KernelSpec, input: RefineInput) {
  const { poolSize: P, c, bonus, slots: given } = input;
  const [slots, cols, k, h0] = [given.slice(), await columns.get(given), given.length, kernelAtZero(kernel)];
  let weights: Float64Array = input.weights.slice();
  const inSet = Int32Array.from({ length: P }, (_, u) => slots.indexOf(u));
  const before = objective(c, cols, slots, weights);
  const tolerance = 1e-12 * Math.abs(before);
  let swaps = 0;
  for (let round = 0; round < Math.max(1, input.rounds); round++) {
    const Bu = new Float64Array(P);
    for (let r = 0; r < k; r++) for (let u = 0; u < P; u++) Bu[u] += weights[r] * cols[r][u];
    let swapsThisRound = 0;
    while (swaps < input.maxSwaps) {
      let best = -tolerance;
      let bestR = -1;
      let bestU = -1;
      for (let r = 0; r < k; r++) {
        const wr = weights[r];
        if (input.frozen?.[r] || wr === 0) continue;
        const s = slots[r];
        const constant = Bu[s] - c[s] - wr * h0;
        for (let u = 0; u < P; u++) {
          if (inSet[u] >= 0) continue;
          const delta = 2 * wr * (c[u] - Bu[u] + wr * cols[r][u] + constant) + (bonus ? bonus[s] - bonus[u] : 0);
          if (delta < best) [best, bestR, bestU] = [delta, r, u];
        }
      }
      if (bestR < 0) break;
      const [next] = await columns.get([bestU]);
      for (let u = 0; u < P; u++) Bu[u] += weights[bestR] * (next[u] - cols[bestR][u]);
      cols[bestR] = next;
      inSet[slots[bestR]] = -1;
      inSet[bestU] = bestR;
      slots[bestR] = bestU;
      swaps++;
      swapsThisRound++;
    }
    if (!input.optimizeWeights) break;
    const KSS = new Float64Array(k * k);
    for (let r = 0; r < k; r++) for (let q = 0; q < k; q++) KSS[r * k + q] = cols[q][slots[r]];
    weights = solveWeights(Float64Array.from(slots, (u) => c[u]), KSS, { start: weights }).weights;
    if (swapsThisRound === 0 && round > 0) break;
  }
  return { slots, swaps, after: objective(c, cols, slots, weights) };
}

function objective(c: Float64Array, cols: Float64Array[], slots: Int32Array, w: Float64Array): number {
  let lin = 0;
  let quad = 0;
  for (let r = 0; r < slots.length; r++) {
    lin += w[r] * c[slots[r]];
    for (let q = 0; q < slots.length; q++) quad += w[r] * w[q] * cols[q][slots[r]];
  }
  return 2 * lin - quad;
}

const kernels: Array<[string, KernelSpec]> = [
  ['energy', { kind: 'energy', a: 0.5 }],
  ['gaussian', { kind: 'gaussian', sigma: 3 }],
];

describe('refineBySwaps', () => {
  for (const [name, kernel] of kernels) {
    for (const optimizeWeights of [false, true]) {
      it(`takes the swaps a full scan of all pairs takes (${name}, ${optimizeWeights ? 'optimized' : 'uniform'} weights)`, async () => {
        const P = 600;
        const d = 4;
        const k = 12;
        const { pool, c, rng } = await problem(optimizeWeights ? 2 : 1, P, d, kernel);
        const input: RefineInput = {
          poolSize: P,
          c,
          slots: rng.sample(P, k),
          weights: new Float64Array(k).fill(1 / k),
          optimizeWeights,
          maxSwaps: 20 * k,
          rounds: 3,
        };
        const expected = await bruteForce(new KernelColumns(backend, kernel, pool, P, d), kernel, input);
        const got = await refineBySwaps(new KernelColumns(backend, kernel, pool, P, d), kernel, input);
        expect(expected.swaps).toBeGreaterThan(3);
        expect(Array.from(got.slots)).toEqual(Array.from(expected.slots));
        expect(got.swaps).toBe(expected.swaps);
        expect(got.after).toBeCloseTo(expected.after, 12);
        expect(got.scoredPairs).toBeLessThan(got.swaps * k * P);
      });
    }
  }

  it('keeps frozen slots and weighs the bonus as a full scan does', async () => {
    const kernel: KernelSpec = { kind: 'energy', a: 0.5 };
    const P = 500;
    const d = 3;
    const k = 10;
    const { pool, c, rng } = await problem(3, P, d, kernel);
    const slots = rng.sample(P, k);
    const bonus = new Float64Array(P);
    for (const u of rng.sample(P, 40)) bonus[u] = 0.002;
    const frozen = Uint8Array.from({ length: k }, (_, r) => (r >= k - 2 ? 1 : 0));
    const input: RefineInput = { poolSize: P, c, slots, weights: new Float64Array(k).fill(1 / k), frozen, bonus, optimizeWeights: true, maxSwaps: 200, rounds: 3 };
    const expected = await bruteForce(new KernelColumns(backend, kernel, pool, P, d), kernel, input);
    const got = await refineBySwaps(new KernelColumns(backend, kernel, pool, P, d), kernel, input);
    expect(Array.from(got.slots)).toEqual(Array.from(expected.slots));
    expect(Array.from(got.slots.subarray(k - 2))).toEqual(Array.from(slots.subarray(k - 2)));
  });

  it('stops at maxSwaps and never raises the objective', async () => {
    const kernel: KernelSpec = { kind: 'energy', a: 0.5 };
    const { pool, c, rng } = await problem(4, 400, 3, kernel);
    const input: RefineInput = { poolSize: 400, c, slots: rng.sample(400, 8), weights: new Float64Array(8).fill(1 / 8), optimizeWeights: false, maxSwaps: 3, rounds: 1 };
    const got = await refineBySwaps(new KernelColumns(backend, kernel, pool, 400, 3), kernel, input);
    expect(got.swaps).toBe(3);
    expect(got.after).toBeLessThan(got.before);
  });
});

describe('KernelColumns', () => {
  it('returns the same columns with a cache far smaller than the columns asked for', async () => {
    const kernel: KernelSpec = { kind: 'energy', a: 0.5 };
    const P = 300;
    const d = 3;
    const { pool, c } = await problem(5, P, d, kernel);
    const roomy = new KernelColumns(backend, kernel, pool, P, d);
    const tight = new KernelColumns(backend, kernel, pool, P, d, 40 * P);
    const asked = Array.from({ length: 60 }, (_, i) => (i * 7) % P);
    const many = await tight.get(asked);
    expect(many.map((col) => Array.from(col))).toEqual((await roomy.get(asked)).map((col) => Array.from(col)));
    // Greedy forward selection asks for one column at a time: the same picks whatever the cache.
    expect(Array.from(await greedyForward(tight, kernel, c, 50))).toEqual(Array.from(await greedyForward(roomy, kernel, c, 50)));
  });
});

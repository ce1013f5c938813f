import { describe, expect, it } from 'vitest';
import { ReferenceBackend } from '../../src/compute/reference-backend.js';
import { Rng } from '../../src/core/random.js';
import { projectToSimplex, solveWeights, weightObjective } from '../../src/core/weights.js';

const energy = { kind: 'energy', a: 0.01 } as const;

async function problem(points: number[][], data: number[][]) {
  const ref = new ReferenceBackend();
  const d = points[0].length;
  const p = Float32Array.from(points.flat());
  const x = Float32Array.from(data.flat());
  const K = await ref.kernelMatrix(p, points.length, p, points.length, d, energy);
  const sums = await ref.kernelColumnSums(x, data.length, p, points.length, d, energy);
  const c = Float64Array.from(sums, (v) => v / data.length);
  return { c, K };
}

describe('simplex projection (Duchi et al. 2008)', () => {
  it('leaves a point of the simplex unchanged', () => {
    expect(Array.from(projectToSimplex(Float64Array.of(0.2, 0.3, 0.5)))).toEqual([0.2, 0.3, 0.5].map((v) => expect.closeTo(v, 12)));
  });
  it('projects worked examples to their hand-computed images', () => {
    // (2, 0) → (1, 0); (1, 1) → (½, ½); (0.5, 0.5, 2) → (0, 0, 1): derivation from the KKT conditions.
    expect(Array.from(projectToSimplex(Float64Array.of(2, 0)))).toEqual([1, 0]);
    expect(Array.from(projectToSimplex(Float64Array.of(1, 1)))).toEqual([0.5, 0.5]);
    expect(Array.from(projectToSimplex(Float64Array.of(0.5, 0.5, 2)))).toEqual([0, 0, 1]);
  });
  it('gives non-negative weights summing to 1 and is idempotent on random vectors', () => {
    const rng = new Rng(3);
    for (let t = 0; t < 200; t++) {
      const v = Float64Array.from({ length: 1 + rng.int(20) }, () => 10 * rng.normal());
      const w = projectToSimplex(Float64Array.from(v));
      expect(Math.min(...w)).toBeGreaterThanOrEqual(0);
      expect(w.reduce((a, b) => a + b, 0)).toBeCloseTo(1, 12);
      const again = projectToSimplex(Float64Array.from(w));
      again.forEach((x, i) => expect(x).toBeCloseTo(w[i], 12));
    }
  });
});

describe('weight solver', () => {
  it('weights stay on the simplex when points coincide', async () => {
    const { c, K } = await problem([[0], [0], [0], [1]], [[0], [0.5], [1], [2]]);
    const sol = solveWeights(c, K);
    expect(Math.min(...sol.weights)).toBeGreaterThanOrEqual(0);
    expect(sol.weights.reduce((a, b) => a + b, 0)).toBeCloseTo(1, 12);
    // Coinciding points are interchangeable: together they carry the weight one of them would.
    const alone = solveWeights(...Object.values(await problem([[0], [1]], [[0], [0.5], [1], [2]])) as [Float64Array, Float64Array]);
    expect(sol.weights[0] + sol.weights[1] + sol.weights[2]).toBeCloseTo(alone.weights[0], 4);
  });

  it('reaches the KKT point: equal gradients on the support, larger off it', async () => {
    const rng = new Rng(9);
    const data = Array.from({ length: 300 }, () => [rng.normal(), rng.normal()]);
    const points = Array.from({ length: 12 }, () => [2 * rng.normal(), 2 * rng.normal()]);
    const { c, K } = await problem(points, data);
    const sol = solveWeights(c, K, { tol: 1e-10, maxIterations: 50_000 });
    expect(sol.converged).toBe(true);
    const grad = new Float64Array(c.length);
    weightObjective(c, K, sol.weights, grad);
    const support = Array.from(sol.weights.keys()).filter((i) => sol.weights[i] > 1e-6);
    const minGrad = Math.min(...grad);
    for (const i of support) expect(grad[i] - minGrad).toBeLessThan(1e-4);
    // No vertex of the simplex does better (convexity ⇒ the KKT point is the minimum).
    for (let i = 0; i < c.length; i++) {
      const e = new Float64Array(c.length);
      e[i] = 1;
      expect(weightObjective(c, K, e)).toBeGreaterThanOrEqual(sol.objective - 1e-12);
    }
  });

  it('reports non-convergence as data when the iteration cap is hit', async () => {
    // Coinciding points make the exact support solve singular, so only the capped iterations run.
    const rng = new Rng(2);
    const data = Array.from({ length: 100 }, () => [rng.normal()]);
    const points = Array.from({ length: 30 }, (_, i) => [i < 2 ? 0.5 : rng.normal()]);
    const { c, K } = await problem(points, data);
    const sol = solveWeights(c, K, { maxIterations: 1, tol: 1e-15 });
    expect(sol.converged).toBe(false);
    expect(sol.gap).toBeGreaterThan(0);
    expect(sol.weights.reduce((a, b) => a + b, 0)).toBeCloseTo(1, 12);
  });
});

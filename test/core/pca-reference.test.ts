import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { Matrix, SingularValueDecomposition } from 'ml-matrix';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { Rng } from '../../src/core/random.js';
import { DenseRows } from '../../src/core/rows.js';
import { parseSpace, prepareSpace } from '../../src/core/space.js';
import { defaultBackend } from '../helpers/backends.js';
import { loadMnist } from '../helpers/mnist.js';

/** Reference values from Debian's scikit-learn (scripts/reference/mnist-pca.py). */
const reference = JSON.parse(readFileSync(join(import.meta.dirname, '..', 'fixtures', 'mnist-pca-reference.json'), 'utf8')) as {
  source: string;
  explainedVarianceRatio: number[];
  components: number[][];
};

let backend: ComputeBackend;
beforeAll(async () => {
  backend = await defaultBackend();
});
afterAll(async () => backend.dispose());

describe('pca:M against scikit-learn PCA on MNIST', () => {
  it(`matches ${reference.source}: variance ratios and the principal subspace`, async () => {
    const mnist = loadMnist();
    const M = reference.explainedVarianceRatio.length;
    const space = await prepareSpace(new DenseRows(mnist.data, mnist.rows, mnist.cols), parseSpace(`pca:${M}`), backend, new Rng(1));
    const ratios = space.explainedVarianceRatio!;
    // Randomized subspace iteration (5 power steps, 2M + 10 columns), products in float32: ratios
    // within 0.1% of sklearn's exact SVD (stated tolerance; measured well below it).
    ratios.forEach((r, i) => expect(Math.abs(r - reference.explainedVarianceRatio[i]) / reference.explainedVarianceRatio[i]).toBeLessThan(1e-3));
    // Principal angles between the two M-dimensional subspaces: the singular values of AᵀB are their cosines.
    const d = mnist.cols;
    const A = new Matrix(d, M);
    const B = new Matrix(d, M);
    for (let t = 0; t < d; t++) {
      for (let j = 0; j < M; j++) {
        A.set(t, j, space.axes![t * M + j]);
        B.set(t, j, reference.components[j][t]);
      }
    }
    const cosines = new SingularValueDecomposition(A.transpose().mmul(B)).diagonal;
    // Largest principal angle at most 1° (cos ≥ 0.99985).
    expect(Math.min(...cosines)).toBeGreaterThan(Math.cos(Math.PI / 180));
  });
});

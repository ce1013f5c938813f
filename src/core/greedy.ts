import type { KernelColumns } from './kernel-columns.js';
import { kernelAtZero, type KernelSpec } from '../compute/kernel-spec.js';

/**
 * Greedy forward selection over candidate items: k steps, each adding the candidate that most
 * lowers D² of the chosen set with uniform weights (the discrete counterpart of kernel herding;
 * Chen, Welling & Smola, UAI 2010). With cᵤ known for every candidate, step m costs one kernel
 * column K(pool, new item) and O(pool) updates:
 *   D²(S ∪ {u}) + const = (2/m)(Σ_S c + cᵤ) − (Σ_{S×S} K + 2 Σ_{j∈S} K(u, j) + h(0)) / m².
 * Returns positions in the pool. A second start for the swap refinement, independent of the descent.
 * `given` pool positions (fixed items) are in S from the start and count in m; k more are chosen.
 */
export async function greedyForward(columns: KernelColumns, kernel: KernelSpec, c: Float64Array, k: number, given: ArrayLike<number> = []): Promise<Int32Array> {
  const poolSize = columns.size;
  const h0 = kernelAtZero(kernel);
  const rowSum = new Float64Array(poolSize);
  const taken = new Uint8Array(poolSize);
  const chosen = new Int32Array(k);
  const f = given.length;
  let sumC = 0;
  let sumK = 0;
  if (f > 0) {
    const cols = await columns.get(given);
    for (let g = 0; g < f; g++) {
      taken[given[g]] = 1;
      sumC += c[given[g]];
      for (let u = 0; u < poolSize; u++) rowSum[u] += cols[g][u];
    }
    for (let g = 0; g < f; g++) sumK += rowSum[given[g]];
  }
  for (let m = 1; m <= k; m++) {
    let best = Infinity;
    let pick = -1;
    const size = f + m;
    for (let u = 0; u < poolSize; u++) {
      if (taken[u]) continue;
      const value = (2 / size) * (sumC + c[u]) - (sumK + 2 * rowSum[u] + h0) / (size * size);
      if (value < best) {
        best = value;
        pick = u;
      }
    }
    chosen[m - 1] = pick;
    taken[pick] = 1;
    sumC += c[pick];
    sumK += 2 * rowSum[pick] + h0;
    if (m < k) {
      const [col] = await columns.get([pick]);
      for (let u = 0; u < poolSize; u++) rowSum[u] += col[u];
    }
  }
  return chosen;
}

/**
 * An order of the representatives in which every prefix is a good summary: greedy forward
 * selection, each step adding the representative that most lowers the prefix's discrepancy with
 * uniform weights over the prefix,
 *   D²(S) = (2/m) Σ_{i∈S} cᵢ − (1/m²) Σ_{i,j∈S} Kᵢⱼ − const,   m = |S|.
 * O(k²) with running row sums. Returns the order and the prefix curve D²(first m), m = 1..k.
 */
export function greedyPrefixOrder(c: ArrayLike<number>, K: Float64Array, constant: number): { order: number[]; curve: number[] } {
  const k = c.length;
  const used = new Uint8Array(k);
  const rowSum = new Float64Array(k); // Σ_{j∈S} K_ij for every i
  const order: number[] = [];
  const curve: number[] = [];
  let sumC = 0;
  let sumK = 0;
  for (let m = 1; m <= k; m++) {
    let best = Infinity;
    let bestI = -1;
    for (let i = 0; i < k; i++) {
      if (used[i]) continue;
      const value = (2 / m) * (sumC + c[i]) - (sumK + 2 * rowSum[i] + K[i * k + i]) / (m * m) - constant;
      if (value < best) {
        best = value;
        bestI = i;
      }
    }
    used[bestI] = 1;
    order.push(bestI);
    sumC += c[bestI];
    sumK += 2 * rowSum[bestI] + K[bestI * k + bestI];
    for (let i = 0; i < k; i++) rowSum[i] += K[i * k + bestI];
    curve.push(best);
  }
  return { order, curve };
}

/** D² of each prefix (first m, uniform weights) of a fixed order: the same formula without the greedy choice. */
export function prefixCurve(c: ArrayLike<number>, K: Float64Array, constant: number): number[] {
  const k = c.length;
  const curve: number[] = [];
  let sumC = 0;
  let sumK = 0;
  for (let m = 1; m <= k; m++) {
    const i = m - 1;
    let cross = 0;
    for (let j = 0; j < i; j++) cross += K[i * k + j];
    sumC += c[i];
    sumK += 2 * cross + K[i * k + i];
    curve.push((2 / m) * sumC - sumK / (m * m) - constant);
  }
  return curve;
}

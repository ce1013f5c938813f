/**
 * An order of the representatives in which every prefix is a good summary: greedy forward
 * selection, each step adding the representative that most lowers the prefix's discrepancy with
 * uniform weights over the prefix,
 *   D²(S) = (2/m) Σ_{i∈S} cᵢ − (1/m²) Σ_{i,j∈S} Kᵢⱼ − const,   m = |S|.
 * O(k²) with running row sums. Returns the order and the prefix curve D²(first m), m = 1..k.
 * `fixed` indices (fixed items) belong to every prefix and are not ordered: the order and the curve
 * then cover the other indices only, each prefix evaluated together with all fixed ones.
 */
export function greedyPrefixOrder(c: ArrayLike<number>, K: Float64Array, constant: number, fixed: ArrayLike<number> = []): { order: number[]; curve: number[] } {
  const k = c.length;
  const used = new Uint8Array(k);
  const rowSum = new Float64Array(k); // Σ_{j∈S} K_ij for every i
  const order: number[] = [];
  const curve: number[] = [];
  let sumC = 0;
  let sumK = 0;
  const add = (j: number): void => {
    used[j] = 1;
    sumC += c[j];
    sumK += 2 * rowSum[j] + K[j * k + j];
    for (let i = 0; i < k; i++) rowSum[i] += K[i * k + j];
  };
  for (let g = 0; g < fixed.length; g++) add(fixed[g]);
  for (let m = fixed.length + 1; m <= k; m++) {
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
    order.push(bestI);
    add(bestI);
    curve.push(best);
  }
  return { order, curve };
}

/**
 * D² of each prefix (first m, uniform weights) of a fixed order: the same formula without the greedy
 * choice. With `fixed` indices, the prefixes run over the other indices in index order, each with
 * all fixed ones (uniform weights over fixed + prefix).
 */
export function prefixCurve(c: ArrayLike<number>, K: Float64Array, constant: number, fixed: ArrayLike<number> = []): number[] {
  const k = c.length;
  const isFixed = new Uint8Array(k);
  for (let g = 0; g < fixed.length; g++) isFixed[fixed[g]] = 1;
  const inSet: number[] = [];
  const curve: number[] = [];
  let sumC = 0;
  let sumK = 0;
  const add = (i: number): void => {
    let cross = 0;
    for (const j of inSet) cross += K[i * k + j];
    sumC += c[i];
    sumK += 2 * cross + K[i * k + i];
    inSet.push(i);
  };
  for (let g = 0; g < fixed.length; g++) add(fixed[g]);
  for (let i = 0; i < k; i++) {
    if (isFixed[i]) continue;
    add(i);
    const m = inSet.length;
    curve.push((2 / m) * sumC - sumK / (m * m) - constant);
  }
  return curve;
}

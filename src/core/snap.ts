import type { ComputeBackend } from '../compute/backend.js';
import type { Rng } from './random.js';
import { localPasses, type CandidateLists } from './row-passes.js';
import type { RowSource } from './rows.js';

export type { CandidateLists } from './row-passes.js';

/**
 * The M rows nearest to each point, exact, streamed over the whole dataset in blocks: each block's
 * top-M (computed inside the backend) is merged into the running top-M of every point.
 */
export function nearestCandidates(rows: RowSource, backend: ComputeBackend, points: Float32Array, k: number, m: number): Promise<CandidateLists> {
  return localPasses.nearest(rows, backend, points, k, m);
}

/**
 * Distinct real items for the points: all (point, candidate) pairs in order of distance, each
 * point taking its nearest candidate not yet taken. A point whose M candidates are all taken
 * gets the nearest unused row of the other points' candidates, else a random unused row.
 * `taken` marks rows that may not be chosen (e.g. fixed items). `preferred[j]` (a row, or −1) is
 * taken by point j first whenever it is among j's candidates (stable re-selection: the item the
 * point stood for before).
 */
export function assignDistinct(
  cand: CandidateLists,
  k: number,
  rowCount: number,
  rng: Rng,
  taken: Set<number> = new Set(),
  preferred?: Int32Array,
): Int32Array {
  const M = cand.m;
  const order = Array.from({ length: k * M }, (_, i) => i).filter((i) => cand.index[i] >= 0);
  order.sort((a, b) => cand.sqDist[a] - cand.sqDist[b] || a - b);
  const chosen = new Int32Array(k).fill(-1);
  const used = new Set(taken);
  if (preferred) {
    for (let j = 0; j < k; j++) {
      const row = preferred[j];
      if (row < 0 || used.has(row)) continue;
      for (let r = 0; r < M; r++) {
        if (cand.index[j * M + r] !== row) continue;
        chosen[j] = row;
        used.add(row);
        break;
      }
    }
  }
  for (const pair of order) {
    const j = Math.floor(pair / M);
    const row = cand.index[pair];
    if (chosen[j] >= 0 || used.has(row)) continue;
    chosen[j] = row;
    used.add(row);
  }
  for (let j = 0; j < k; j++) {
    if (chosen[j] >= 0) continue;
    let row = -1;
    for (let i = 0; i < k * M && row < 0; i++) if (cand.index[i] >= 0 && !used.has(cand.index[i])) row = cand.index[i];
    while (row < 0) {
      const r = rng.int(rowCount);
      if (!used.has(r)) row = r;
    }
    chosen[j] = row;
    used.add(row);
  }
  return chosen;
}

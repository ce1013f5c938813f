import type { ComputeBackend } from '../compute/backend.js';
import type { Rng } from './random.js';
import { blockRanges, type RowSource } from './rows.js';

export interface CandidateLists {
  /** k×M row indices, nearest first. */
  index: Int32Array;
  sqDist: Float32Array;
  m: number;
}

/**
 * The M rows nearest to each point, exact, streamed over the whole dataset in blocks: each block's
 * top-M (computed inside the backend) is merged into the running top-M of every point.
 */
export async function nearestCandidates(
  rows: RowSource,
  backend: ComputeBackend,
  points: Float32Array,
  k: number,
  m: number,
  blockRows = 16_384,
): Promise<CandidateLists> {
  const M = Math.min(m, rows.rows);
  const d = rows.cols;
  const index = new Int32Array(k * M).fill(-1);
  const sqDist = new Float32Array(k * M).fill(Infinity);
  for (const [start, count] of blockRanges(rows.rows, blockRows)) {
    const mb = Math.min(M, count);
    const near = await backend.nearestRows(rows.read(start, count), count, points, k, d, mb);
    for (let j = 0; j < k; j++) {
      const merged: Array<[number, number]> = [];
      for (let r = 0; r < M; r++) if (index[j * M + r] >= 0) merged.push([sqDist[j * M + r], index[j * M + r]]);
      for (let r = 0; r < mb; r++) merged.push([near.sqDist[j * mb + r], start + near.index[j * mb + r]]);
      merged.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
      for (let r = 0; r < M; r++) {
        sqDist[j * M + r] = r < merged.length ? merged[r][0] : Infinity;
        index[j * M + r] = r < merged.length ? merged[r][1] : -1;
      }
    }
  }
  return { index, sqDist, m: M };
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

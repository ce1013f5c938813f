import type { ComputeBackend } from '../compute/backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import { blockRanges, type RowSource } from './rows.js';

/**
 * The full passes of a selection (every row against the points): the snapping candidates and the
 * coverage assignment. Each runs over row ranges made of whole blocks of PASS_BLOCK_ROWS rows,
 * and the parts merge exactly:
 * - nearest candidates: each point's top-M under the order (squared distance, row), a strict total
 *   order, so the top-M of the union of the parts' top-M lists is the top-M of all rows whatever
 *   the split;
 * - assignment: each row's nearest point and distance are the row's own; the data-term sums are
 *   kept per block (float64) and added in block order, the order one unsplit pass adds them in.
 * So a pass split across processes returns, bit for bit, what one pass in one process returns.
 */

/** Rows per block of every full pass. A range given to a pass starts on a multiple of it. */
export const PASS_BLOCK_ROWS = 16_384;

/** Rows [start, start + count) of the selection space, row-major (a borrowed or a fresh array). */
export type BlockReader = (start: number, count: number) => Float32Array | Promise<Float32Array>;

export interface CandidateLists {
  /** k×M row indices, nearest first; −1 where a range has fewer than M rows. */
  index: Int32Array;
  sqDist: Float32Array;
  m: number;
}

/** One range's share of an assignment pass. */
export interface AssignPart {
  start: number;
  count: number;
  /** Nearest point of each row of the range. */
  assignment: Int32Array;
  /** Euclidean distance to it. */
  distance: Float32Array;
  /** Per block of the range, in order: Σ_i h(|x_i − p_j|) for each point j (blocks × k). */
  blockSums: Float64Array;
}

export interface AssignPass {
  assignment: Int32Array;
  distance: Float32Array;
  /** Σ over all rows of h(|x_i − p_j|), per point. */
  hSum: Float64Array;
}

/**
 * Where the full passes run: in this process (localPasses), or split into row ranges that other
 * workers take (see src/jobs/pass-shards.ts). Every implementation returns exactly what
 * localPasses returns; test/jobs/row-passes-conformance.test.ts checks them.
 */
export interface RowPasses {
  /** For each of the k points, the M = min(m, rows) rows nearest to it. */
  nearest(rows: RowSource, backend: ComputeBackend, points: Float32Array, k: number, m: number): Promise<CandidateLists>;
  /** Every row's nearest point, and the data-term sums of the points. */
  assign(rows: RowSource, backend: ComputeBackend, kernel: KernelSpec, points: Float32Array, k: number): Promise<AssignPass>;
}

/** Both passes in this process, over the whole range. */
export const localPasses: RowPasses = {
  nearest: (rows, backend, points, k, m) => nearestInRange((s, c) => rows.read(s, c), backend, points, k, rows.cols, Math.min(m, rows.rows), 0, rows.rows),
  async assign(rows, backend, kernel, points, k) {
    const part = await assignInRange((s, c) => rows.read(s, c), backend, kernel, points, k, rows.cols, 0, rows.rows);
    return mergeAssignParts([part], rows.rows, k);
  },
};

/** Whole-block ranges [start, count) of at most `shardRows` rows (rounded down to whole blocks, at least one). */
export function passRanges(rows: number, shardRows: number): Array<[number, number]> {
  const step = Math.max(1, Math.floor(shardRows / PASS_BLOCK_ROWS)) * PASS_BLOCK_ROWS;
  return [...blockRanges(rows, step)];
}

/** The M rows of [start, start + count) nearest to each point, exact, block by block. */
export async function nearestInRange(
  read: BlockReader,
  backend: ComputeBackend,
  points: Float32Array,
  k: number,
  d: number,
  M: number,
  start: number,
  count: number,
): Promise<CandidateLists> {
  checkRange(start);
  const index = new Int32Array(k * M).fill(-1);
  const sqDist = new Float32Array(k * M).fill(Infinity);
  for (const [s, c] of blockRanges(start + count, PASS_BLOCK_ROWS, start)) {
    const mb = Math.min(M, c);
    const near = await backend.nearestRows(await read(s, c), c, points, k, d, mb);
    for (let j = 0; j < k; j++) {
      const merged: Array<[number, number]> = [];
      for (let r = 0; r < M; r++) if (index[j * M + r] >= 0) merged.push([sqDist[j * M + r], index[j * M + r]]);
      for (let r = 0; r < mb; r++) merged.push([near.sqDist[j * mb + r], s + near.index[j * mb + r]]);
      keepNearest(merged, index, sqDist, j, M);
    }
  }
  return { index, sqDist, m: M };
}

/** The candidate lists of consecutive ranges merged: each point's top-M of their union. */
export function mergeCandidates(parts: CandidateLists[], k: number, M: number): CandidateLists {
  const index = new Int32Array(k * M).fill(-1);
  const sqDist = new Float32Array(k * M).fill(Infinity);
  for (let j = 0; j < k; j++) {
    const merged: Array<[number, number]> = [];
    for (const p of parts) {
      if (p.m !== M || p.index.length !== k * M) throw new RangeError(`a part holds ${p.index.length / Math.max(p.m, 1)}×${p.m} candidates, expected ${k}×${M}`);
      for (let r = 0; r < M; r++) if (p.index[j * M + r] >= 0) merged.push([p.sqDist[j * M + r], p.index[j * M + r]]);
    }
    keepNearest(merged, index, sqDist, j, M);
  }
  return { index, sqDist, m: M };
}

function keepNearest(merged: Array<[number, number]>, index: Int32Array, sqDist: Float32Array, j: number, M: number): void {
  merged.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
  for (let r = 0; r < M; r++) {
    sqDist[j * M + r] = r < merged.length ? merged[r][0] : Infinity;
    index[j * M + r] = r < merged.length ? merged[r][1] : -1;
  }
}

/** Each row of [start, start + count) assigned to its nearest point, with the per-block data-term sums. */
export async function assignInRange(
  read: BlockReader,
  backend: ComputeBackend,
  kernel: KernelSpec,
  points: Float32Array,
  k: number,
  d: number,
  start: number,
  count: number,
): Promise<AssignPart> {
  checkRange(start);
  const assignment = new Int32Array(count);
  const distance = new Float32Array(count);
  const blockSums = new Float64Array(Math.ceil(count / PASS_BLOCK_ROWS) * k);
  let b = 0;
  for (const [s, c] of blockRanges(start + count, PASS_BLOCK_ROWS, start)) {
    const a = await backend.assign(await read(s, c), c, points, k, d, kernel);
    assignment.set(a.index, s - start);
    for (let i = 0; i < c; i++) distance[s - start + i] = Math.sqrt(Math.max(a.sqDist[i], 0));
    blockSums.set(a.hSum!, b * k);
    b++;
  }
  return { start, count, assignment, distance, blockSums };
}

/** Parts covering [0, rows) in order, joined; the sums added block by block in row order. */
export function mergeAssignParts(parts: AssignPart[], rows: number, k: number): AssignPass {
  const assignment = new Int32Array(rows);
  const distance = new Float32Array(rows);
  const hSum = new Float64Array(k);
  let next = 0;
  for (const p of parts) {
    if (p.start !== next) throw new RangeError(`parts must cover the rows in order: one starts at ${p.start}, expected ${next}`);
    assignment.set(p.assignment, p.start);
    distance.set(p.distance, p.start);
    for (let b = 0; b < p.blockSums.length / k; b++) for (let j = 0; j < k; j++) hSum[j] += p.blockSums[b * k + j];
    next += p.count;
  }
  if (next !== rows) throw new RangeError(`parts cover ${next} rows of ${rows}`);
  return { assignment, distance, hSum };
}

function checkRange(start: number): void {
  if (start % PASS_BLOCK_ROWS !== 0) throw new RangeError(`a pass range starts on a whole block (${PASS_BLOCK_ROWS} rows), not at ${start}`);
}

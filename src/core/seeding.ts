import type { ComputeBackend } from '../compute/backend.js';
import type { Rng } from './random.js';
import type { RowSource } from './rows.js';

/**
 * k-means++ seeding (Arthur & Vassilvitskii, SODA 2007): the first point uniformly, each next one
 * with probability proportional to the squared distance to the nearest point chosen so far (D²
 * sampling), on a random sample of rows (by default 16 per seed, at least 4,096). Returns row indices into `rows` (distinct rows; when the
 * sample has fewer than k distinct rows, duplicates of chosen rows are taken last).
 */
export async function seedKMeansPlusPlus(
  rows: RowSource,
  k: number,
  backend: ComputeBackend,
  rng: Rng,
  sampleRows?: number,
): Promise<Int32Array> {
  const n = rows.rows;
  // 16 rows per seed (at least 4,096): each seed costs one pass over the sample, and the seeds
  // only start the descent, whose result the swap refinement then improves over every row.
  const m = Math.min(n, Math.max(sampleRows ?? Math.max(4096, 16 * k), k));
  const sampleIdx = m === n ? rng.shuffle(Int32Array.from({ length: n }, (_, i) => i)) : rng.sample(n, m);
  const sample = rows.gather(sampleIdx);
  const d = rows.cols;
  const best = new Float64Array(m).fill(Infinity);
  const chosen = new Int32Array(k);
  const taken = new Uint8Array(m);
  let pick = rng.int(m);
  for (let c = 0; c < k; c++) {
    chosen[c] = sampleIdx[pick];
    taken[pick] = 1;
    if (c === k - 1) break;
    const dist = await backend.sqDistances(sample, m, sample.subarray(pick * d, pick * d + d), 1, d);
    let total = 0;
    for (let i = 0; i < m; i++) {
      if (dist[i] < best[i]) best[i] = dist[i];
      if (!taken[i]) total += best[i];
    }
    if (total > 0) {
      let u = rng.next() * total;
      pick = -1;
      for (let i = 0; i < m; i++) {
        if (taken[i]) continue;
        u -= best[i];
        if (u < 0 && best[i] > 0) {
          pick = i;
          break;
        }
      }
      if (pick < 0) pick = lastUntaken(taken, best);
    } else {
      pick = lastUntaken(taken, null);
    }
  }
  return chosen;
}

/** The untaken row with positive weight nearest the end (floating-point leftovers), else any untaken row. */
function lastUntaken(taken: Uint8Array, weight: Float64Array | null): number {
  for (let i = taken.length - 1; i >= 0; i--) if (!taken[i] && (!weight || weight[i] > 0)) return i;
  for (let i = taken.length - 1; i >= 0; i--) if (!taken[i]) return i;
  return 0;
}

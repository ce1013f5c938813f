import type { ComputeBackend } from '../compute/backend.js';
import type { Rng } from './random.js';
import type { RowSource } from './rows.js';

/**
 * k-means++ seeding (Arthur & Vassilvitskii, SODA 2007): the first point uniformly, each next one
 * with probability proportional to the squared distance to the nearest point chosen so far (D²
 * sampling), on a random sample of rows (by default 16 per seed, at least 4,096). Returns row indices into `rows` (distinct rows; when the
 * sample has fewer than k distinct rows, duplicates of chosen rows are taken last).
 * `given` points (fixed items, earlier representatives) count as chosen already: every seed,
 * the first included, is D²-sampled against them. `exclude` rows are never chosen.
 */
export async function seedKMeansPlusPlus(
  rows: RowSource,
  k: number,
  backend: ComputeBackend,
  rng: Rng,
  sampleRows?: number,
  options: { given?: Float32Array; exclude?: ReadonlySet<number> } = {},
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
  if (options.exclude?.size) for (let i = 0; i < m; i++) if (options.exclude.has(sampleIdx[i])) taken[i] = 1;
  // best[i] = min over `width` columns of dist (m×width), then a D²-sampled untaken row.
  const nextPick = (dist: Float32Array, width: number): number => {
    let total = 0;
    for (let i = 0; i < m; i++) {
      for (let j = 0; j < width; j++) if (dist[i * width + j] < best[i]) best[i] = dist[i * width + j];
      if (!taken[i]) total += best[i];
    }
    if (!(total > 0)) return lastUntaken(taken, null);
    let u = rng.next() * total;
    for (let i = 0; i < m; i++) {
      if (taken[i]) continue;
      u -= best[i];
      if (u < 0 && best[i] > 0) return i;
    }
    return lastUntaken(taken, best);
  };
  const g = options.given ? options.given.length / d : 0;
  let pick: number;
  if (g > 0) pick = nextPick(await backend.sqDistances(sample, m, options.given!, g, d), g);
  else {
    pick = rng.int(m);
    if (taken[pick]) pick = lastUntaken(taken, null);
  }
  for (let c = 0; ; c++) {
    chosen[c] = sampleIdx[pick];
    taken[pick] = 1;
    if (c === k - 1) break;
    pick = nextPick(await backend.sqDistances(sample, m, sample.subarray(pick * d, pick * d + d), 1, d), 1);
  }
  return chosen;
}

/** The untaken row with positive weight nearest the end (floating-point leftovers), else any untaken row. */
function lastUntaken(taken: Uint8Array, weight: Float64Array | null): number {
  for (let i = taken.length - 1; i >= 0; i--) if (!taken[i] && (!weight || weight[i] > 0)) return i;
  for (let i = taken.length - 1; i >= 0; i--) if (!taken[i]) return i;
  return 0;
}

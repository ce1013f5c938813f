import type { ComputeBackend } from '../compute/backend.js';
import type { Rng } from './random.js';
import type { RowSource } from './rows.js';

export interface ScaleEstimate {
  /** Median pairwise distance on the sample (the median heuristic). */
  median: number;
  sampleRows: number;
  /** True when the median was 0 (mostly duplicate rows) and a fallback was used. */
  degenerate: boolean;
}

/**
 * The median heuristic (common practice; e.g. Gretton et al. 2012 §8 use it for σ): the median of
 * the pairwise distances within a random sample of rows. When more than half of the pairs are
 * duplicates the median is 0; we then take the mean of the non-zero distances (or 1) and say so.
 */
export async function medianDistance(
  rows: RowSource,
  backend: ComputeBackend,
  rng: Rng,
  sampleRows = 1000,
): Promise<ScaleEstimate> {
  const m = Math.min(sampleRows, rows.rows);
  if (m < 2) return { median: 1, sampleRows: m, degenerate: true };
  const sample = rows.gather(rng.sample(rows.rows, m));
  const sq = await backend.sqDistances(sample, m, sample, m, rows.cols);
  const dist = new Float64Array((m * (m - 1)) / 2);
  let at = 0;
  for (let i = 0; i < m; i++) for (let j = i + 1; j < m; j++) dist[at++] = Math.sqrt(Math.max(sq[i * m + j], 0));
  dist.sort();
  const half = dist.length >> 1;
  const median = dist.length % 2 ? dist[half] : (dist[half - 1] + dist[half]) / 2;
  if (median > 0) return { median, sampleRows: m, degenerate: false };
  let sum = 0;
  let count = 0;
  for (const v of dist) {
    if (v > 0) {
      sum += v;
      count++;
    }
  }
  return { median: count ? sum / count : 1, sampleRows: m, degenerate: true };
}

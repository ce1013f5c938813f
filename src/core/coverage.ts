import type { ComputeBackend } from '../compute/backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import { localPasses, type AssignPass, type RowPasses } from './row-passes.js';
import type { RowSource } from './rows.js';

export interface LabelCodes {
  /** Per row: index into `names`, or −1 for no label. */
  codes: Int32Array;
  names: string[];
}

export interface RepresentativeCoverage {
  count: number;
  share: number;
  meanDistance: number;
  p90Distance: number;
  maxDistance: number;
  /** Label → number of items nearest to this representative (when labels exist). */
  labels: Record<string, number> | null;
}

export interface CoverageStats {
  perRepresentative: RepresentativeCoverage[];
  meanDistance: number;
  p90Distance: number;
  maxDistance: number;
  coveredWithin: Array<{ radius: number; fraction: number }>;
  worstCovered: Array<{ index: number; distance: number; nearest: number }>;
  /** Per label: items, and how many representatives have it as their most common label. */
  labels: Record<string, { count: number; representatives: number; meanDistance: number }> | null;
  /** cᵢ = E_y h(|repᵢ − y|) over all rows, from the same pass (exact data term). */
  dataTermMeans: Float64Array;
  /** Nearest representative per row (for the assignments export). */
  assignment: Int32Array;
  distance: Float32Array;
}

export interface CoverageOptions {
  radii: number[];
  worstCount: number;
}

/**
 * One pass assigning every row to its nearest representative (through `passes`: here, or split
 * across workers), then the statistics. Distances are Euclidean, in the selection space.
 */
export async function coverageStats(
  rows: RowSource,
  backend: ComputeBackend,
  kernel: KernelSpec,
  reps: Float32Array,
  k: number,
  labels: LabelCodes | null,
  o: CoverageOptions,
  passes: RowPasses = localPasses,
): Promise<CoverageStats> {
  return coverageFromPass(await passes.assign(rows, backend, kernel, reps, k), k, labels, o);
}

/** The statistics of an assignment pass over all rows. */
export function coverageFromPass(pass: AssignPass, k: number, labels: LabelCodes | null, o: CoverageOptions): CoverageStats {
  const { assignment, distance, hSum } = pass;
  const n = assignment.length;

  // Group distances by representative (counting sort) for per-representative quantiles.
  const counts = new Int32Array(k);
  for (let i = 0; i < n; i++) counts[assignment[i]]++;
  const offsets = new Int32Array(k + 1);
  for (let j = 0; j < k; j++) offsets[j + 1] = offsets[j] + counts[j];
  const grouped = new Float32Array(n);
  const fill = offsets.slice(0, k);
  for (let i = 0; i < n; i++) grouped[fill[assignment[i]]++] = distance[i];

  const labelCounts = labels ? Array.from({ length: k }, () => new Map<number, number>()) : null;
  if (labels && labelCounts) {
    for (let i = 0; i < n; i++) {
      const code = labels.codes[i];
      if (code < 0) continue;
      const m = labelCounts[assignment[i]];
      m.set(code, (m.get(code) ?? 0) + 1);
    }
  }

  const perRepresentative: RepresentativeCoverage[] = [];
  for (let j = 0; j < k; j++) {
    const group = grouped.subarray(offsets[j], offsets[j + 1]).sort();
    let sum = 0;
    for (const v of group) sum += v;
    let repLabels: Record<string, number> | null = null;
    if (labels && labelCounts) {
      repLabels = {};
      for (const [code, c] of [...labelCounts[j]].sort((a, b) => b[1] - a[1])) repLabels[labels.names[code]] = c;
    }
    perRepresentative.push({
      count: counts[j],
      share: counts[j] / n,
      meanDistance: group.length ? sum / group.length : 0,
      p90Distance: quantileSorted(group, 0.9),
      maxDistance: group.length ? group[group.length - 1] : 0,
      labels: repLabels,
    });
  }

  const sorted = Float32Array.from(distance).sort();
  let total = 0;
  for (const v of sorted) total += v;
  const coveredWithin = o.radii.map((radius) => ({ radius, fraction: upperBound(sorted, radius) / n }));

  return {
    perRepresentative,
    meanDistance: total / n,
    p90Distance: quantileSorted(sorted, 0.9),
    maxDistance: sorted[n - 1],
    coveredWithin,
    worstCovered: worst(distance, sorted, assignment, o.worstCount),
    labels: labels ? labelSummary(labels, assignment, distance, perRepresentative) : null,
    dataTermMeans: Float64Array.from(hSum, (v) => v / n),
    assignment,
    distance,
  };
}

/** Linear-interpolated quantile of a sorted array (type 7, the default of R and numpy). */
export function quantileSorted(sorted: ArrayLike<number>, q: number): number {
  const n = sorted.length;
  if (n === 0) return 0;
  const pos = (n - 1) * q;
  const lo = Math.floor(pos);
  const hi = Math.min(lo + 1, n - 1);
  return sorted[lo] + (pos - lo) * (sorted[hi] - sorted[lo]);
}

function upperBound(sorted: Float32Array, x: number): number {
  let lo = 0;
  let hi = sorted.length;
  while (lo < hi) {
    const mid = (lo + hi) >> 1;
    if (sorted[mid] <= x) lo = mid + 1;
    else hi = mid;
  }
  return lo;
}

function worst(distance: Float32Array, sorted: Float32Array, assignment: Int32Array, count: number): CoverageStats['worstCovered'] {
  const m = Math.min(count, distance.length);
  if (m === 0) return [];
  // The m-th largest distance (from the sorted copy the caller already has) bounds the candidates,
  // so only those indices are sorted.
  const threshold = sorted[distance.length - m];
  const picked: number[] = [];
  for (let i = 0; i < distance.length; i++) if (distance[i] >= threshold) picked.push(i);
  picked.sort((a, b) => distance[b] - distance[a] || a - b);
  return picked.slice(0, m).map((i) => ({ index: i, distance: distance[i], nearest: assignment[i] }));
}

function labelSummary(
  labels: LabelCodes,
  assignment: Int32Array,
  distance: Float32Array,
  reps: RepresentativeCoverage[],
): NonNullable<CoverageStats['labels']> {
  const out: NonNullable<CoverageStats['labels']> = {};
  const sums = new Float64Array(labels.names.length);
  const counts = new Int32Array(labels.names.length);
  for (let i = 0; i < assignment.length; i++) {
    const code = labels.codes[i];
    if (code < 0) continue;
    counts[code]++;
    sums[code] += distance[i];
  }
  labels.names.forEach((name, code) => {
    out[name] = { count: counts[code], representatives: 0, meanDistance: counts[code] ? sums[code] / counts[code] : 0 };
  });
  for (const rep of reps) {
    const top = rep.labels ? Object.keys(rep.labels)[0] : undefined;
    if (top !== undefined) out[top].representatives++;
  }
  return out;
}

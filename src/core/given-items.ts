import { CairnError } from '../errors.js';

/** Items that count as representatives already (e.g. annotated earlier): never moved, snapped or swapped out. */
export interface FixedItems {
  /** f × source.cols, row-major, in the source space (before the space transform). */
  vectors: Float32Array;
  /** For each fixed vector its row in the source, or −1 when it comes from another dataset. Default: all −1. */
  rows?: Int32Array;
}

/** An earlier selection to stay close to (stable re-selection). */
export interface PreviousSelection {
  /** m × source.cols, row-major, in the source space: the earlier representatives, in rank order. */
  vectors: Float32Array;
  /** Each one's row in the source if the item still exists (matched by id by the caller), else −1. */
  rows: Int32Array;
  /**
   * λ ≥ 0: keeping all previous items may cost up to about this fraction of the warm start's D²
   * (see stabilityThreshold in select.ts). 0 = a plain warm start. Default DEFAULT_STABILITY_STRENGTH.
   */
  strength?: number;
}

/**
 * Default λ. Chosen on the two scenarios of test/core/stable-reselection.test.ts (8 Gaussians in
 * 8-D, n = 4000, k = 16): 5% new items from the same distribution, where it keeps ≥ 80% of the
 * items within 10% of the unconstrained D², and a new well-separated cluster of 10% of the rows,
 * which still gets a representative of its own.
 */
export const DEFAULT_STABILITY_STRENGTH = 0.1;

export interface CheckedGivenItems {
  /** Fixed vectors (source space) and their rows (−1 = not a row); f = 0 when none. */
  fixed: { vectors: Float32Array; rows: Int32Array; count: number };
  /** Rows of the source that are fixed items: never chosen as new items. */
  fixedRows: Set<number>;
  /** The earlier selection without the items that are now fixed items; null when none was given. */
  previous: { vectors: Float32Array; rows: Int32Array; count: number; strength: number } | null;
}

/** Validates ctx.fixed and ctx.previous against a source of n rows × cols columns. */
export function checkGivenItems(fixed: FixedItems | undefined, previous: PreviousSelection | undefined, n: number, cols: number): CheckedGivenItems {
  const f = fixed ? checkVectors('fixed.vectors', fixed.vectors, cols) : 0;
  const fixedRowsArray = fixed?.rows ? checkRows('fixed.rows', fixed.rows, f, n) : new Int32Array(f).fill(-1);
  const fixedRows = new Set<number>();
  for (const r of fixedRowsArray) if (r >= 0) fixedRows.add(r);
  let prev: CheckedGivenItems['previous'] = null;
  if (previous) {
    const m = checkVectors('previous.vectors', previous.vectors, cols);
    const rows = checkRows('previous.rows', previous.rows, m, n);
    const strength = previous.strength ?? DEFAULT_STABILITY_STRENGTH;
    if (!Number.isFinite(strength) || strength < 0) {
      throw new CairnError('INVALID_ARGUMENT', `previous.strength must be a finite number ≥ 0 (got ${strength}).`, { field: 'previous.strength', got: strength });
    }
    // An earlier representative that is now a fixed item is represented already.
    const keep = Array.from(rows.keys()).filter((i) => !fixedRows.has(rows[i]));
    const vectors = new Float32Array(keep.length * cols);
    keep.forEach((i, j) => vectors.set(previous.vectors.subarray(i * cols, (i + 1) * cols), j * cols));
    prev = { vectors, rows: Int32Array.from(keep, (i) => rows[i]), count: keep.length, strength };
  }
  return { fixed: { vectors: fixed && f > 0 ? fixed.vectors : new Float32Array(0), rows: fixedRowsArray, count: f }, fixedRows, previous: prev };
}

function checkVectors(field: string, v: Float32Array, cols: number): number {
  if (!(v instanceof Float32Array) || v.length % cols !== 0) {
    throw new CairnError('DIMENSION_MISMATCH', `${field} must be a Float32Array of whole rows of ${cols} values.`, { field, cols, got: v?.length ?? null });
  }
  for (let i = 0; i < v.length; i++) {
    if (!Number.isFinite(v[i])) throw new CairnError('INVALID_ARGUMENT', `${field} has a non-finite value at ${i}.`, { field, at: i });
  }
  return v.length / cols;
}

function checkRows(field: string, rows: Int32Array, count: number, n: number): Int32Array {
  if (!(rows instanceof Int32Array) || rows.length !== count) {
    throw new CairnError('DIMENSION_MISMATCH', `${field} must be an Int32Array with one entry per vector (${count}).`, { field, expected: count, got: rows?.length ?? null });
  }
  const seen = new Set<number>();
  for (let i = 0; i < rows.length; i++) {
    const r = rows[i];
    if (r < -1 || r >= n) throw new CairnError('INVALID_ARGUMENT', `${field}[${i}] = ${r} is neither −1 nor a row of the dataset (0..${n - 1}).`, { field, at: i, got: r });
    if (r >= 0 && seen.has(r)) throw new CairnError('INVALID_ARGUMENT', `${field} names row ${r} twice.`, { field, at: i, got: r });
    seen.add(r);
  }
  return rows;
}

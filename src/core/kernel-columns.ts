import type { ComputeBackend } from '../compute/backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import { prepareRows } from '../compute/prepared-rows.js';

/** Cached columns hold at most this many values in all (160 MB of float64). */
const MAX_CACHED_VALUES = 2e7;

/**
 * Columns per kernel call: on the ONNX backend (2 cores, pool 31k × 128) 256 columns cost 16 calls
 * of 16 about 40 ms but 0.1–0.5 s in one call, and 16 columns cost about what one does.
 */
const COLUMNS_PER_CALL = 16;

/**
 * Columns K(pool, u) = [h(|pool_v − pool_u|)]_v of the candidates' kernel matrix, computed on
 * demand (several at once in one kernel call) and cached: the greedy start and the swap searches
 * from every start ask for many of the same columns.
 */
export class KernelColumns {
  private readonly cache = new Map<number, Float64Array>();
  /**
   * The pool as prepared rows [x, |x|², 1], built once: each column then reads it without a
   * per-call copy. The plain rows are not kept; a candidate's vector is read from here.
   */
  private readonly prepared: Float32Array;

  constructor(
    private readonly backend: ComputeBackend,
    private readonly kernel: KernelSpec,
    pool: Float32Array,
    readonly size: number,
    readonly d: number,
    /** Cap on the cached values (float64), below MAX_CACHED_VALUES; e.g. from a memory budget. */
    private readonly maxCachedValues = MAX_CACHED_VALUES,
  ) {
    this.prepared = prepareRows(pool, size, d);
  }

  /** Drops every cached column (the refinement is over; later phases need the memory). */
  clear(): void {
    this.cache.clear();
  }

  async get(items: ArrayLike<number>): Promise<Float64Array[]> {
    const wanted = Array.from(new Set(Array.from(items)));
    const keep = new Set(wanted);
    const missing = wanted.filter((u) => !this.cache.has(u));
    const capacity = Math.max(wanted.length, Math.floor(Math.min(MAX_CACHED_VALUES, this.maxCachedValues) / Math.max(1, this.size)));
    // Full: the least recently used columns go (a Map iterates in insertion order; hits re-insert).
    for (const u of wanted) {
      const col = this.cache.get(u);
      if (col) {
        this.cache.delete(u);
        this.cache.set(u, col);
      }
    }
    for (const u of this.cache.keys()) {
      if (this.cache.size + missing.length <= capacity) break;
      if (!keep.has(u)) this.cache.delete(u);
    }
    const e = this.d + 2;
    for (let from = 0; from < missing.length; from += COLUMNS_PER_CALL) {
      const part = missing.slice(from, from + COLUMNS_PER_CALL);
      const m = part.length;
      const points = new Float32Array(m * this.d);
      part.forEach((u, j) => points.set(this.prepared.subarray(u * e, u * e + this.d), j * this.d));
      const block = await this.backend.kernelMatrixPrepared(this.prepared, this.size, points, m, this.d, this.kernel);
      // One column is the block itself; several are split out of it (row-major size × m).
      const cols = m === 1 ? [block] : part.map(() => new Float64Array(this.size));
      if (m > 1) for (let v = 0; v < this.size; v++) for (let j = 0; j < m; j++) cols[j][v] = block[v * m + j];
      part.forEach((u, j) => this.cache.set(u, cols[j]));
    }
    return Array.from(items, (u) => this.cache.get(u)!);
  }
}

import type { ComputeBackend } from '../compute/backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import { prepareRows } from '../compute/prepared-rows.js';

/** Cached columns hold at most this many values in all (160 MB of float64). */
const MAX_CACHED_VALUES = 2e7;

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

  async get(items: ArrayLike<number>): Promise<Float64Array[]> {
    const wanted = Array.from(new Set(Array.from(items)));
    let missing = wanted.filter((u) => !this.cache.has(u));
    if (missing.length) {
      // Full: start over, computing every wanted column (those cached too, which the clear drops).
      if ((this.cache.size + missing.length) * this.size > Math.min(MAX_CACHED_VALUES, this.maxCachedValues)) {
        this.cache.clear();
        missing = wanted;
      }
      const points = new Float32Array(missing.length * this.d);
      const e = this.d + 2;
      missing.forEach((u, j) => points.set(this.prepared.subarray(u * e, u * e + this.d), j * this.d));
      const block = await this.backend.kernelMatrixPrepared(this.prepared, this.size, points, missing.length, this.d, this.kernel);
      missing.forEach((u, j) => {
        const col = new Float64Array(this.size);
        for (let v = 0; v < this.size; v++) col[v] = block[v * missing.length + j];
        this.cache.set(u, col);
      });
    }
    return Array.from(items, (u) => this.cache.get(u)!);
  }
}

/**
 * Read access to the rows of a dataset after preprocessing. The core only reads data through
 * this interface, so a selection can run over an in-memory array or a store read in blocks.
 */
export interface RowSource {
  readonly rows: number;
  readonly cols: number;
  /**
   * True when the rows are in memory; false when every read goes to a file. Scattered reads of a
   * file are slow, so the descent then draws its minibatches as blocks of consecutive rows.
   */
  readonly resident: boolean;
  /**
   * Rows [start, start + count) as a row-major array: borrowed from a resident source (callers
   * must not modify it), fresh from a source that is not resident.
   */
  read(start: number, count: number): Float32Array;
  /**
   * The given rows, in the given order, row-major; into `out` when given (reusing a buffer
   * matters: first writes to fresh memory fault pages in, which costs more than the copy).
   */
  gather(indices: ArrayLike<number>, out?: Float32Array): Float32Array;
}

/** Rows held in one row-major Float32Array. */
export class DenseRows implements RowSource {
  readonly resident = true;

  constructor(
    readonly data: Float32Array,
    readonly rows: number,
    readonly cols: number,
  ) {
    if (data.length !== rows * cols) throw new RangeError(`data has ${data.length} values, expected ${rows}×${cols}`);
  }

  read(start: number, count: number): Float32Array {
    return this.data.subarray(start * this.cols, (start + count) * this.cols);
  }

  gather(indices: ArrayLike<number>, into?: Float32Array): Float32Array {
    const d = this.cols;
    const out = into ?? new Float32Array(indices.length * d);
    for (let i = 0; i < indices.length; i++) {
      const r = indices[i];
      out.set(this.data.subarray(r * d, r * d + d), i * d);
    }
    return out;
  }
}

/**
 * (x − shift) ⊙ scale applied on the fly. Centering is always applied, even in raw space:
 * distances do not change, and smaller norms reduce the float32 cancellation in
 * |x|² + |p|² − 2x·p inside the compute kernels.
 */
export class AffineRows implements RowSource {
  readonly rows: number;
  readonly cols: number;
  readonly resident: boolean;

  constructor(
    private readonly source: RowSource,
    readonly shift: Float32Array,
    readonly scale: Float32Array | null,
  ) {
    this.rows = source.rows;
    this.cols = source.cols;
    this.resident = source.resident;
  }

  read(start: number, count: number): Float32Array {
    // A resident source lends its rows: copied first (slice() is a memcpy). Others' are fresh.
    const block = this.source.read(start, count);
    return this.apply(this.source.resident ? block.slice() : block);
  }

  gather(indices: ArrayLike<number>, into?: Float32Array): Float32Array {
    return this.apply(this.source.gather(indices, into));
  }

  private apply(a: Float32Array): Float32Array {
    const d = this.cols;
    const shift = this.shift;
    const scale = this.scale;
    if (scale) {
      for (let i = 0; i < a.length; i += d) for (let t = 0; t < d; t++) a[i + t] = (a[i + t] - shift[t]) * scale[t];
    } else {
      for (let i = 0; i < a.length; i += d) for (let t = 0; t < d; t++) a[i + t] -= shift[t];
    }
    return a;
  }
}

/** [start, count] of consecutive blocks of at most `blockRows` rows covering [from, rows). */
export function* blockRanges(rows: number, blockRows: number, from = 0): Generator<[number, number]> {
  for (let start = from; start < rows; start += blockRows) yield [start, Math.min(blockRows, rows - start)];
}

/** The indices start, start + 1, …, start + count − 1. */
export function range(start: number, count: number): Int32Array {
  const out = new Int32Array(count);
  for (let i = 0; i < count; i++) out[i] = start + i;
  return out;
}

import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { DenseRows, type RowSource } from '../core/rows.js';

/** Largest single read: readSync takes at most 2 GiB − 1 bytes at once. */
const READ_CHUNK = 1024 ** 3;

/**
 * The rows of a row-major float32 file (a stored dataset's matrix.f32, an embedding's
 * matrix.f32, or the data of a float32 .npy after its header, at `dataOffset`), read from disk on demand instead of held in memory: the selection's streamed
 * passes read blocks, its samples and minibatches gather rows. Gathers read each run of
 * consecutive rows with one positional read, so a minibatch of row blocks costs one read per
 * block. The file stays open until close().
 */
export class FileRows implements RowSource {
  readonly resident = false;
  private fd: number | null;

  constructor(
    readonly path: string,
    readonly rows: number,
    readonly cols: number,
    /** Byte position of the first row; the file must end with the last row. */
    readonly dataOffset = 0,
  ) {
    this.fd = openSync(path, 'r');
    const size = fstatSync(this.fd).size;
    if (size !== dataOffset + rows * cols * 4) {
      closeSync(this.fd);
      this.fd = null;
      const after = dataOffset ? ` after ${dataOffset} header bytes` : '';
      throw new RangeError(`${path} has ${size} bytes, expected ${rows}×${cols} float32 values (${rows * cols * 4})${after}`);
    }
  }

  read(start: number, count: number): Float32Array {
    if (!(Number.isInteger(start) && Number.isInteger(count) && start >= 0 && count >= 0 && start + count <= this.rows)) {
      throw new RangeError(`rows ${start}..${start + count} are outside 0..${this.rows}`);
    }
    const out = new Float32Array(count * this.cols);
    this.readInto(out, 0, start, count);
    return out;
  }

  gather(indices: ArrayLike<number>, into?: Float32Array): Float32Array {
    const d = this.cols;
    const n = indices.length;
    const out = into ?? new Float32Array(n * d);
    // Positions in increasing row order, so that runs of consecutive rows become one read each.
    const order = Int32Array.from({ length: n }, (_, i) => i).sort((a, b) => indices[a] - indices[b]);
    let i = 0;
    while (i < n) {
      const first = indices[order[i]];
      if (!(Number.isInteger(first) && first >= 0 && first < this.rows)) throw new RangeError(`row ${first} is outside 0..${this.rows}`);
      // A run: consecutive rows that also sit at consecutive output positions.
      let len = 1;
      while (i + len < n && indices[order[i + len]] === first + len && order[i + len] === order[i] + len) len++;
      this.readInto(out, order[i] * d, first, len);
      // Repeated indices (a row gathered twice) are copied from the first copy.
      let j = i + len;
      while (j < n && indices[order[j]] === indices[order[j - 1]]) {
        out.copyWithin(order[j] * d, order[j - 1] * d, order[j - 1] * d + d);
        j++;
      }
      i = j;
    }
    return out;
  }

  close(): void {
    if (this.fd !== null) closeSync(this.fd);
    this.fd = null;
  }

  private readInto(out: Float32Array, offset: number, startRow: number, count: number): void {
    if (this.fd === null) throw new Error(`${this.path} is closed`);
    const bytes = new Uint8Array(out.buffer, out.byteOffset + offset * 4, count * this.cols * 4);
    let done = 0;
    while (done < bytes.length) {
      const got = readSync(this.fd, bytes, done, Math.min(READ_CHUNK, bytes.length - done), this.dataOffset + startRow * this.cols * 4 + done);
      if (got === 0) throw new Error(`${this.path} ended early`);
      done += got;
    }
  }
}

/**
 * The rows of a float32 matrix file for a selection: loaded into memory when they fit
 * `budgetBytes`, else a FileRows reading the file on demand.
 */
export function openRows(path: string, rows: number, cols: number, budgetBytes = Infinity): DenseRows | FileRows {
  const file = new FileRows(path, rows, cols);
  if (rows * cols * 4 > budgetBytes) return file;
  try {
    return new DenseRows(file.read(0, rows), rows, cols);
  } finally {
    file.close();
  }
}

/** Closes the file behind rows read on demand; rows in memory need nothing. */
export function closeRows(rows: RowSource): void {
  if (rows instanceof FileRows) rows.close();
}

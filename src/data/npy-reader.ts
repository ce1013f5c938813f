import { open, type FileHandle } from 'node:fs/promises';
import { CairnError } from '../errors.js';
import { readNpyHeader, type NpyHeader } from './npy-header.js';
import type { DatasetReader, DatasetSink, ReaderLimits, ReadOptions, ReadSummary } from './reader.js';
import { checkCols, checkFileSize, checkRows } from './reader-limits.js';
import { RowBatcher } from './row-batcher.js';

/** Bytes read per positional read: few syscalls, and a constant, small buffer whatever the file size. */
const CHUNK_BYTES = 4 * 1024 * 1024;

/**
 * NumPy .npy files: 2-D, C order, dtype <f4, <f8 or |u1 (uint8 is divided by 255 when
 * options.scaleUint8, else kept as 0..255). The file size must match the header exactly: a short
 * file is NPY_TRUNCATED, a longer one NPY_TRAILING_DATA (extra bytes mean the file is not what its
 * header says, e.g. two arrays concatenated, so guessing would be wrong). Ids are row numbers; no labels.
 */
export const npyReader: DatasetReader = {
  format: 'npy',
  async read(path: string, sink: DatasetSink, options: ReadOptions): Promise<ReadSummary> {
    const fileSize = await checkFileSize(path, options.limits);
    const fh = await open(path, 'r');
    try {
      const header = await readNpyHeader(fh, fileSize);
      checkNpyData(header, fileSize, options.limits);
      const { cols } = header;
      const batcher = new RowBatcher(sink, options);
      await batcher.begin(cols);
      await streamRows(fh, header, batcher, options.scaleUint8);
      await batcher.finish();
      return { rows: batcher.rows, cols, droppedNonFinite: batcher.droppedNonFinite, skippedImages: 0, hasLabels: false };
    } finally {
      await fh.close();
    }
  },
};

/**
 * The checks of a .npy's header against the file and the limits before any row is read: at least
 * one row, maxCols, maxRows, and a data size that matches the header exactly (short: NPY_TRUNCATED,
 * longer: NPY_TRAILING_DATA). Shared with openNpyRows, which reads float32 files in place.
 */
export function checkNpyData(header: NpyHeader, fileSize: number, limits: ReaderLimits): void {
  const { rows, cols, itemSize, dataOffset } = header;
  if (rows === 0) throw new CairnError('DATASET_EMPTY');
  checkCols(cols, limits);
  checkRows(rows, limits);
  const expected = rows * cols * itemSize;
  const actual = fileSize - dataOffset;
  if (actual < expected) {
    throw new CairnError('NPY_TRUNCATED', `The header promises ${expected} data bytes; the file has ${actual}.`, {
      expectedBytes: expected,
      actualBytes: actual,
    });
  }
  if (actual > expected) {
    throw new CairnError('NPY_TRAILING_DATA', `The header promises ${expected} data bytes; the file has ${actual}.`, {
      expectedBytes: expected,
      actualBytes: actual,
    });
  }
}

async function streamRows(fh: FileHandle, header: NpyHeader, batcher: RowBatcher, scaleUint8: boolean): Promise<void> {
  const { rows, cols, itemSize, dataOffset, dtype } = header;
  const rowBytes = cols * itemSize;
  const rowsPerChunk = Math.max(1, Math.floor(CHUNK_BYTES / rowBytes));
  // Its own ArrayBuffer at offset 0, so typed-array views over it are aligned.
  const buffer = Buffer.allocUnsafeSlow(rowsPerChunk * rowBytes);
  let row = 0;
  while (row < rows) {
    const n = Math.min(rowsPerChunk, rows - row);
    const length = n * rowBytes;
    let filled = 0;
    while (filled < length) {
      const position = dataOffset + row * rowBytes + filled;
      const { bytesRead } = await fh.read(buffer, filled, length - filled, position);
      // The size was checked up front; ending early means the file shrank while being read.
      if (bytesRead === 0) throw new CairnError('NPY_TRUNCATED', 'The .npy file ended early.');
      filled += bytesRead;
    }
    const values =
      dtype === 'f4'
        ? new Float32Array(buffer.buffer, 0, n * cols)
        : dtype === 'f8'
          ? new Float64Array(buffer.buffer, 0, n * cols)
          : new Uint8Array(buffer.buffer, 0, n * cols);
    const scale = dtype === 'u1' && scaleUint8;
    for (let r = 0; r < n; r++) {
      const src = values.subarray(r * cols, (r + 1) * cols);
      const slot = batcher.slot();
      if (scale) {
        for (let j = 0; j < cols; j++) slot[j] = src[j] / 255;
      } else {
        slot.set(src); // float64 → float32 rounds to nearest
      }
      if (batcher.commit(null, null)) await batcher.flush();
    }
    row += n;
    batcher.bytesRead = dataOffset + row * rowBytes;
  }
}

import { stat } from 'node:fs/promises';
import { basename } from 'node:path';
import { CairnError } from '../errors.js';
import type { ReaderLimits } from './reader.js';

/**
 * Longest single record (a CSV row, a JSON Lines line) a text reader buffers: 64 MiB. A row at
 * maxCols = 65,536 written with 17 significant digits is about 1.5 MiB, so this only stops files
 * that are not line-structured (or one huge label) from being buffered whole.
 */
export const MAX_RECORD_BYTES = 64 * 1024 * 1024;

/** Stats the input and checks maxFileBytes before anything is read. Returns the size in bytes. */
export async function checkFileSize(path: string, limits: ReaderLimits): Promise<number> {
  let size: number;
  try {
    const info = await stat(path);
    if (!info.isFile()) throw new Error('not a regular file');
    size = info.size;
  } catch (err) {
    // The base name only: a full path may say more about the uploader than the error needs to.
    throw new CairnError('DATASET_SOURCE_UNREADABLE', undefined, { source: basename(path) }, { cause: err });
  }
  if (size > limits.maxFileBytes) {
    throw new CairnError('DATASET_TOO_LARGE', `The file has ${size} bytes; the limit is ${limits.maxFileBytes}.`, {
      bytes: size,
      limit: limits.maxFileBytes,
    });
  }
  return size;
}

/**
 * Read-stream buffer for a file of `size` bytes: 1 MiB for large files (few syscalls), less for
 * small ones, where allocating a 1 MiB buffer per open costs more than the read.
 */
export function streamChunkBytes(size: number): number {
  return Math.min(1024 * 1024, Math.max(16 * 1024, size));
}

export function checkCols(cols: number, limits: ReaderLimits): void {
  if (cols > limits.maxCols) {
    throw new CairnError('DATASET_TOO_MANY_COLUMNS', `The dataset has ${cols} columns; the limit is ${limits.maxCols}.`, {
      cols,
      limit: limits.maxCols,
    });
  }
}

/** `rows` may be a count announced by a header (npy, parquet) or the row about to be added. */
export function checkRows(rows: number, limits: ReaderLimits): void {
  if (rows > limits.maxRows) {
    throw new CairnError('DATASET_TOO_MANY_ROWS', `The dataset has more than ${limits.maxRows} rows.`, {
      rows,
      limit: limits.maxRows,
    });
  }
}

export function throwIfAborted(signal: AbortSignal | undefined): void {
  if (signal?.aborted) throw new CairnError('DATASET_INGEST_CANCELLED', undefined, {}, { cause: signal.reason });
}

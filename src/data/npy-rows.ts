import { createHash, type Hash } from 'node:crypto';
import { open, type FileHandle } from 'node:fs/promises';
import { basename } from 'node:path';
import { DenseRows } from '../core/rows.js';
import { FileRows } from './file-rows.js';
import { detectFormat } from './format-sniffer.js';
import { readFully, readNpyHeader, type NpyHeader } from './npy-header.js';
import { checkNpyData } from './npy-reader.js';
import type { DatasetFormat, ReadOptions } from './reader.js';
import { checkFileSize, throwIfAborted } from './reader-limits.js';
import { nonFiniteValue } from './row-batcher.js';
import { STORE_VERSION, type ItemLookup, type StoredDatasetMeta } from './stored-dataset.js';

/**
 * Bytes per read: each chunk is hashed and checked while it is still in the CPU cache, and the
 * next chunk is read (in the thread pool) meanwhile.
 */
const CHUNK_BYTES = 2 * 1024 * 1024;

export interface NpyRowsRequest {
  /** As IngestRequest.format: when absent the format is detected as ingestion detects it. */
  format?: DatasetFormat;
  /** Recorded as meta.id. */
  datasetId: string;
  options: ReadOptions;
  /** The rows are read into memory when rows·cols·4 bytes fit, else read from the file on demand. */
  budgetBytes: number;
  /** Default: the path's base name. */
  sourceName?: string;
}

export interface NpyRows {
  /** In memory (fresh, the caller's to transform) or a FileRows over the file's data (close it). */
  rows: DenseRows | FileRows;
  /** The meta.json ingesting the file would write (rows, cols, sizes, sha256 of the whole file). */
  meta: StoredDatasetMeta;
  /** The ids ingestion gives a .npy's rows: the row number; no labels. */
  items: ItemLookup;
}

/**
 * Opens a little-endian float32, C-order .npy as rows without ingesting it: the same header
 * parsing, limits and checks as the npy reader, the same NON_FINITE_VALUE error for the first NaN
 * or ±Infinity, and the same ids and meta as `ingestFile` would give, so a result built from
 * these is identical to one built from the ingested copy. One pass over the file loads (or, for
 * rows read on demand, just streams) the data, checks every value and hashes it.
 *
 * Returns null when the file must be ingested instead: another format or dtype, or a row to drop
 * (nonFinite 'drop', where ingestion renumbers the rows). Bad files throw as ingestion would.
 * FileRows read the file on demand, so it must not change while they are in use.
 */
export async function openNpyRows(path: string, request: NpyRowsRequest): Promise<NpyRows | null> {
  const { options } = request;
  if (request.format !== undefined && request.format !== 'npy') return null;
  const fileSize = await checkFileSize(path, options.limits);
  const sourceName = request.sourceName ?? basename(path);
  if ((request.format ?? (await detectFormat(path, sourceName))) !== 'npy') return null;
  const fh = await open(path, 'r');
  let header: NpyHeader;
  let data: Float32Array | null;
  let sha256: string;
  try {
    header = await readNpyHeader(fh, fileSize);
    if (header.dtype !== 'f4') return null;
    checkNpyData(header, fileSize, options.limits);
    const hash = createHash('sha256');
    const head = Buffer.alloc(header.dataOffset);
    await readFully(fh, head, 0);
    hash.update(head);
    data = header.rows * header.cols * 4 <= request.budgetBytes ? new Float32Array(header.rows * header.cols) : null;
    if (!(await passOverData(fh, header, hash, options, data))) return null;
    sha256 = hash.digest('hex');
  } finally {
    await fh.close();
  }
  const { rows, cols, dataOffset } = header;
  return {
    rows: data ? new DenseRows(data, rows, cols) : new FileRows(path, rows, cols, dataOffset),
    meta: {
      id: request.datasetId,
      rows,
      cols,
      format: 'npy',
      sourceName,
      sourceBytes: fileSize,
      sha256,
      hasLabels: false,
      droppedNonFinite: 0,
      skippedImages: 0,
      createdAt: new Date().toISOString(),
      version: STORE_VERSION,
    },
    items: {
      id(row) {
        if (!(Number.isInteger(row) && row >= 0 && row < rows)) throw new RangeError(`row ${row} is outside 0..${rows}`);
        return String(row);
      },
      label: () => null,
    },
  };
}

/**
 * Reads the data in chunks of whole rows, into `target` when given (else into two buffers taking
 * turns), hashing and checking each chunk while the next one is being read. Returns false at the
 * first non-finite value when such rows are to be dropped; throws NON_FINITE_VALUE when they fail.
 */
async function passOverData(fh: FileHandle, header: NpyHeader, hash: Hash, options: ReadOptions, target: Float32Array | null): Promise<boolean> {
  const { rows, cols, dataOffset } = header;
  const rowsPerChunk = Math.max(1, Math.floor(CHUNK_BYTES / (cols * 4)));
  const buffers = target ? [] : [new Float32Array(rowsPerChunk * cols), new Float32Array(rowsPerChunk * cols)];
  const chunks = Math.ceil(rows / rowsPerChunk);
  const readChunk = async (i: number): Promise<Float32Array> => {
    const start = i * rowsPerChunk;
    const n = Math.min(rowsPerChunk, rows - start);
    const values = target ? target.subarray(start * cols, (start + n) * cols) : buffers[i % 2].subarray(0, n * cols);
    // The size was checked against the header; ending early means the file shrank while being read.
    await readFully(fh, new Uint8Array(values.buffer, values.byteOffset, values.byteLength), dataOffset + start * cols * 4, 'The .npy file ended early.');
    return values;
  };
  let next: Promise<Float32Array> | null = readChunk(0);
  try {
    for (let i = 0; i < chunks; i++) {
      const values = await (next ?? readChunk(i));
      next = i + 1 < chunks ? readChunk(i + 1) : null;
      throwIfAborted(options.signal);
      hash.update(new Uint8Array(values.buffer, values.byteOffset, values.byteLength));
      const bad = firstNonFinite(values);
      if (bad >= 0) {
        if (options.nonFinite === 'drop') return false;
        throw nonFiniteValue(i * rowsPerChunk + Math.floor(bad / cols), bad % cols);
      }
      const done = Math.min(rows, (i + 1) * rowsPerChunk);
      options.onProgress?.({ bytesRead: dataOffset + done * cols * 4, rows: done });
    }
    return true;
  } finally {
    // A read still in flight when a check throws must end before the file is closed.
    await next?.catch(() => undefined);
  }
}

function firstNonFinite(values: Float32Array): number {
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    // v - v is NaN exactly for NaN and ±Infinity (as in RowBatcher).
    if (v - v !== 0) return i;
  }
  return -1;
}

import { createReadStream, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { CairnError, requireArg } from '../errors.js';
import { DenseRows } from '../core/rows.js';
import { ITEMS_FILE, MATRIX_FILE } from './dataset-writer.js';
import { FileRows } from './file-rows.js';
import type { DatasetFormat } from './reader.js';

/** Layout version of a stored dataset folder; bump when the files change meaning. */
export const STORE_VERSION = 1;
export const META_FILE = 'meta.json';

/** The meta.json of a stored dataset. */
export interface StoredDatasetMeta {
  id: string;
  rows: number;
  cols: number;
  format: DatasetFormat;
  /** Base name of the ingested file. */
  sourceName: string;
  sourceBytes: number;
  /** Hex SHA-256 of the ingested file. */
  sha256: string;
  hasLabels: boolean;
  droppedNonFinite: number;
  skippedImages: number;
  /** ISO 8601. */
  createdAt: string;
  version: number;
}

export interface StoredDataset {
  readonly dir: string;
  readonly meta: StoredDatasetMeta;
  /** Rows start..start+count-1, row-major (count × cols). */
  readRows(start: number, count: number): Float32Array;
  /** The whole rows × cols matrix in memory (rows·cols·4 bytes). */
  loadMatrix(): Float32Array;
  /**
   * The matrix for a selection: in memory when its rows·cols·4 bytes fit `budgetBytes`, else read
   * from the file on demand (close() it when done; see closeRows).
   */
  rowSource(budgetBytes?: number): DenseRows | FileRows;
  /** Ids and labels in row order. */
  readItems(): Promise<{ ids: string[]; labels: (string | null)[] }>;
  /**
   * Ids and labels of the given rows only: one pass over items.jsonl that parses just those lines,
   * so a large dataset's ids are not all held (a result needs the representatives' and a few more).
   */
  readItemsAt(rows: Iterable<number>): Promise<ItemLookup>;
}

/** Ids and labels by row number. */
export interface ItemLookup {
  id(row: number): string;
  label(row: number): string | null;
}

/** An ItemLookup over all rows' ids and labels (readItems). */
export function itemLookup(items: { ids: string[]; labels: (string | null)[] }): ItemLookup {
  return { id: (row) => items.ids[row], label: (row) => items.labels[row] ?? null };
}

/**
 * Opens a stored dataset. Reads are positional and open the matrix file per call, so a
 * StoredDataset holds no file descriptor and needs no closing (a rowSource read from the file does).
 */
export function openDataset(storeDir: string, datasetId: string): StoredDataset {
  const dir = join(storeDir, datasetId);
  let meta: StoredDatasetMeta;
  try {
    meta = JSON.parse(readFileSync(join(dir, META_FILE), 'utf8')) as StoredDatasetMeta;
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId });
    throw new CairnError('DATASET_STORE_CORRUPT', undefined, { datasetId }, { cause: err });
  }
  if (meta.version !== STORE_VERSION || !(meta.rows >= 1) || !(meta.cols >= 1)) {
    throw new CairnError('DATASET_STORE_CORRUPT', `Unsupported or damaged meta.json (version ${meta.version}).`, { datasetId });
  }
  const { rows, cols } = meta;
  const matrixPath = join(dir, MATRIX_FILE);

  /** The matrix file read on demand (FileRows checks its size), with coded errors. */
  function matrixFile(): FileRows {
    try {
      return new FileRows(matrixPath, rows, cols);
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId });
      if (err instanceof RangeError) throw new CairnError('DATASET_STORE_CORRUPT', err.message, { datasetId });
      throw err;
    }
  }

  function read(start: number, count: number): Float32Array {
    const file = matrixFile();
    try {
      return file.read(start, count);
    } finally {
      file.close();
    }
  }

  return {
    dir,
    meta,
    readRows(start, count) {
      requireArg(Number.isInteger(start) && start >= 0 && start <= rows, 'start', `an integer in 0..${rows}`, start);
      requireArg(Number.isInteger(count) && count >= 0 && start + count <= rows, 'count', `an integer in 0..${rows - start}`, count);
      return read(start, count);
    },
    loadMatrix() {
      return read(0, rows);
    },
    rowSource(budgetBytes = Infinity) {
      return rows * cols * 4 <= budgetBytes ? new DenseRows(read(0, rows), rows, cols) : matrixFile();
    },
    async readItems() {
      const ids: string[] = [];
      const labels: (string | null)[] = [];
      const input = createReadStream(join(dir, ITEMS_FILE), 'utf8');
      const lines = createInterface({ input, crlfDelay: Infinity });
      try {
        for await (const line of lines) {
          const item = JSON.parse(line) as { id: string; label: string | null };
          ids.push(item.id);
          labels.push(item.label);
        }
      } catch (err) {
        if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId });
        throw new CairnError('DATASET_STORE_CORRUPT', `${ITEMS_FILE} cannot be read.`, { datasetId }, { cause: err });
      } finally {
        lines.close();
        input.destroy();
      }
      if (ids.length !== rows) {
        throw new CairnError('DATASET_STORE_CORRUPT', `${ITEMS_FILE} has ${ids.length} items, expected ${rows}.`, { datasetId });
      }
      return { ids, labels };
    },
    async readItemsAt(wantedRows) {
      const wanted = new Set(wantedRows);
      const found = new Map<number, { id: string; label: string | null }>();
      let row = 0;
      let rest = '';
      try {
        for await (const chunk of createReadStream(join(dir, ITEMS_FILE), { encoding: 'utf8', highWaterMark: 1 << 20 })) {
          const text = rest + (chunk as string);
          let start = 0;
          for (let end = text.indexOf('\n', start); end >= 0; end = text.indexOf('\n', start)) {
            if (wanted.has(row)) found.set(row, JSON.parse(text.slice(start, end)) as { id: string; label: string | null });
            row++;
            start = end + 1;
          }
          rest = text.slice(start);
        }
      } catch (err) {
        if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId });
        throw new CairnError('DATASET_STORE_CORRUPT', `${ITEMS_FILE} cannot be read.`, { datasetId }, { cause: err });
      }
      if (rest.length > 0) row++;
      if (row !== rows) throw new CairnError('DATASET_STORE_CORRUPT', `${ITEMS_FILE} has ${row} items, expected ${rows}.`, { datasetId });
      const item = (r: number) => {
        const it = found.get(r);
        if (!it) throw new RangeError(`row ${r} was not read`);
        return it;
      };
      return { id: (r) => item(r).id, label: (r) => item(r).label ?? null };
    },
  };
}

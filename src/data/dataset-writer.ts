import { createReadStream } from 'node:fs';
import { mkdir, open, writeFile, type FileHandle } from 'node:fs/promises';
import { endianness } from 'node:os';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { CairnError } from '../errors.js';
import { IdRegistry } from './id-registry.js';
import type { DatasetSink } from './reader.js';

/** Longest item id in characters: ids are kept in memory (duplicate check) and shown in results. */
export const MAX_ID_LENGTH = 512;

export const MATRIX_FILE = 'matrix.f32';
export const ITEMS_FILE = 'items.jsonl';
export const THUMBS_DIR = 'thumbs';

/**
 * The store's DatasetSink: appends rows to `matrix.f32` (row-major little-endian float32) and
 * `items.jsonl` (one {"id","label"} per row) inside a folder, as they stream in. Every write is
 * awaited before writeRows resolves, which both bounds memory and lets the reader reuse its batch.
 * Ids are checked here, for every reader alike: non-empty, at most MAX_ID_LENGTH, unique.
 */
export class DatasetWriter implements DatasetSink {
  cols = 0;
  rows = 0;
  private matrix?: FileHandle;
  private items?: FileHandle;
  private thumbsReady = false;
  private readonly registry = new IdRegistry();

  constructor(private readonly dir: string) {
    // Float32Array bytes are written as they are in memory; every platform Node supports in practice is LE.
    if (endianness() !== 'LE') throw new Error('The dataset store requires a little-endian host.');
  }

  async begin(cols: number): Promise<void> {
    if (this.matrix) throw new Error('DatasetWriter.begin called twice');
    if (!Number.isInteger(cols) || cols < 1) throw new CairnError('DATASET_NO_FEATURES');
    this.cols = cols;
    this.matrix = await open(join(this.dir, MATRIX_FILE), 'wx');
    this.items = await open(join(this.dir, ITEMS_FILE), 'wx');
  }

  async writeRows(data: Float32Array, count: number, ids: readonly string[], labels: readonly (string | null)[]): Promise<void> {
    const { matrix, items, cols } = this;
    if (!matrix || !items) throw new Error('DatasetWriter.writeRows called before begin');
    if (data.length !== count * cols || ids.length !== count || labels.length !== count) {
      throw new Error(`DatasetWriter.writeRows: ${count} rows of ${cols} do not match ${data.length} values, ${ids.length} ids, ${labels.length} labels`);
    }
    let lines = '';
    for (let i = 0; i < count; i++) {
      const id = ids[i];
      const row = this.rows + i;
      if (typeof id !== 'string' || id.length === 0 || id.length > MAX_ID_LENGTH) {
        throw new CairnError('DATASET_BAD_ID', `Row ${row} has an empty id or one longer than ${MAX_ID_LENGTH} characters.`, {
          row,
          maxLength: MAX_ID_LENGTH,
        });
      }
      if (!this.registry.add(id, row)) {
        // Write this batch's earlier rows too, so the scan sees every row before this one.
        await writeAll(items, lines);
        lines = '';
        const firstRow = (await this.findFirstRow(id)) ?? -1;
        // The id itself is left out of the message: ids may be personal data and errors get logged.
        throw new CairnError('DATASET_DUPLICATE_ID', `Rows ${firstRow} and ${row} have the same id.`, { row, firstRow });
      }
      lines += JSON.stringify({ id, label: labels[i] ?? null }) + '\n';
    }
    await writeAll(matrix, Buffer.from(data.buffer, data.byteOffset, count * cols * 4));
    await writeAll(items, lines);
    this.rows += count;
  }

  async writeThumbnail(row: number, png: Buffer): Promise<void> {
    if (!Number.isInteger(row) || row < 0) throw new Error(`bad thumbnail row ${row}`);
    const dir = join(this.dir, THUMBS_DIR);
    if (!this.thumbsReady) {
      await mkdir(dir, { recursive: true });
      this.thumbsReady = true;
    }
    await writeFile(join(dir, `${row}.png`), png);
  }

  /** Closes (first syncing to disk when `durable`): after this the folder is complete and may be renamed into place. */
  async close(durable = true): Promise<void> {
    for (const fh of [this.matrix, this.items]) {
      if (!fh) continue;
      if (durable) await fh.sync();
      await fh.close();
    }
    this.matrix = this.items = undefined;
  }

  /** Closes without flushing, ignoring errors: the folder is about to be removed. */
  async abort(): Promise<void> {
    await Promise.allSettled([this.matrix?.close(), this.items?.close()]);
    this.matrix = this.items = undefined;
  }

  /** The stored row of an id already written (the rare duplicate path, so a scan is fine). */
  private async findFirstRow(id: string): Promise<number | undefined> {
    const counted = this.registry.prefixRow(id);
    if (counted !== undefined) return counted;
    const input = createReadStream(join(this.dir, ITEMS_FILE), 'utf8');
    const lines = createInterface({ input, crlfDelay: Infinity });
    let row = 0;
    try {
      for await (const line of lines) {
        if ((JSON.parse(line) as { id: string }).id === id) return row;
        row++;
      }
    } finally {
      lines.close();
      input.destroy();
    }
    return undefined;
  }
}

async function writeAll(fh: FileHandle, data: Buffer | string): Promise<void> {
  if (data.length === 0) return;
  const buf = typeof data === 'string' ? Buffer.from(data, 'utf8') : data;
  let offset = 0;
  while (offset < buf.length) {
    const { bytesWritten } = await fh.write(buf, offset, buf.length - offset);
    offset += bytesWritten;
  }
}

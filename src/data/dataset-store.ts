import { createHash, randomBytes } from 'node:crypto';
import { createReadStream } from 'node:fs';
import { mkdir, mkdtemp, open, readdir, rename, rm, rmdir, unlink } from 'node:fs/promises';
import { basename, join } from 'node:path';
import { CairnError, requireArg } from '../errors.js';
import { DatasetWriter } from './dataset-writer.js';
import { pathExists } from './file-ops.js';
import { detectFormat } from './format-sniffer.js';
import type { DatasetFormat, ReadOptions } from './reader.js';
import { checkFileSize, streamChunkBytes } from './reader-limits.js';
import { isDatasetFormat, loadReader } from './reader-registry.js';
import { META_FILE, STORE_VERSION, type StoredDatasetMeta } from './stored-dataset.js';

export { openDataset, type StoredDataset, type StoredDatasetMeta } from './stored-dataset.js';

/**
 * The internal dataset store: one folder per dataset under `storeDir`, holding matrix.f32,
 * items.jsonl, optional thumbs/ and meta.json (see DatasetWriter and StoredDatasetMeta).
 *
 * Ingestion writes into `<storeDir>/.tmp-<id>-<random>/` and renames that folder to `<storeDir>/<id>`
 * only once every file is complete and synced, so a dataset folder is either whole or absent, and
 * a failed ingestion leaves nothing behind but its error.
 */

/** Dataset ids name folders: letters, digits, '.', '_', '-', 1–128 characters, not starting with a dot. */
const DATASET_ID = /^[A-Za-z0-9][A-Za-z0-9._-]{0,127}$/;

export interface IngestRequest {
  /** The reader to use; when absent it is picked from magic bytes, then extension, then content. */
  format?: DatasetFormat;
  storeDir: string;
  datasetId: string;
  options: ReadOptions;
  /**
   * Sync every file to disk before the folder is renamed into place (default true), so a crash or
   * power loss never leaves a complete-looking folder with missing data. Tests that ingest
   * thousands of tiny files may turn it off.
   */
  durable?: boolean;
  /** The file's name as the user knows it (an upload's client file name): recorded, and used to recognise the format. Default: the path's base name. */
  sourceName?: string;
}

export async function ingestFile(path: string, request: IngestRequest): Promise<StoredDatasetMeta> {
  const { storeDir, datasetId, options } = request;
  checkDatasetId(datasetId);
  requireArg(request.format === undefined || isDatasetFormat(request.format), 'format', 'a known dataset format', request.format);
  await mkdir(storeDir, { recursive: true });
  const finalDir = join(storeDir, datasetId);
  if (await pathExists(finalDir)) throw new CairnError('DATASET_ALREADY_EXISTS', undefined, { datasetId });

  const sourceBytes = await checkFileSize(path, options.limits);
  const sourceName = request.sourceName ?? basename(path);
  const format = request.format ?? (await detectFormat(path, sourceName));
  const reader = await loadReader(format);

  const tmpDir = await mkdtemp(join(storeDir, `.tmp-${datasetId}-`));
  const writer = new DatasetWriter(tmpDir);
  const stopHashing = new AbortController();
  const hashing = sha256File(path, sourceBytes, stopHashing.signal);
  hashing.catch(() => undefined); // awaited below; this only keeps an early failure from being "unhandled"
  try {
    const summary = await reader.read(path, writer, options);
    const sha256 = await hashing.catch((err: unknown) => {
      throw new CairnError('DATASET_SOURCE_UNREADABLE', undefined, { source: sourceName }, { cause: err });
    });
    await writer.close(request.durable ?? true);
    if (writer.rows === 0) throw new CairnError('DATASET_EMPTY');
    if (summary.rows !== writer.rows || summary.cols !== writer.cols) {
      throw new Error(`${format} reader reported ${summary.rows} × ${summary.cols} but wrote ${writer.rows} × ${writer.cols}`);
    }
    const meta: StoredDatasetMeta = {
      id: datasetId,
      rows: writer.rows,
      cols: writer.cols,
      format,
      sourceName,
      sourceBytes,
      sha256,
      hasLabels: summary.hasLabels,
      droppedNonFinite: summary.droppedNonFinite,
      skippedImages: summary.skippedImages,
      createdAt: new Date().toISOString(),
      version: STORE_VERSION,
    };
    await writeMeta(join(tmpDir, META_FILE), JSON.stringify(meta, null, 2) + '\n', request.durable ?? true);
    try {
      await rename(tmpDir, finalDir);
    } catch (err) {
      const code = (err as NodeJS.ErrnoException).code;
      if (code === 'ENOTEMPTY' || code === 'EEXIST') throw new CairnError('DATASET_ALREADY_EXISTS', undefined, { datasetId });
      throw err;
    }
    return meta;
  } catch (err) {
    stopHashing.abort();
    await hashing.catch(() => undefined);
    await writer.abort();
    await removeTree(tmpDir);
    throw err;
  }
}

/** Removes a stored dataset. It is renamed away first, so no reader sees it half deleted. */
export async function deleteDataset(storeDir: string, datasetId: string): Promise<void> {
  checkDatasetId(datasetId);
  const trash = join(storeDir, `.trash-${datasetId}-${randomBytes(6).toString('hex')}`);
  try {
    await rename(join(storeDir, datasetId), trash);
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'ENOENT') throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId });
    throw err;
  }
  await removeTree(trash);
}

function checkDatasetId(datasetId: string): void {
  requireArg(
    typeof datasetId === 'string' && DATASET_ID.test(datasetId),
    'datasetId',
    "1–128 letters, digits, '.', '_' or '-', not starting with '.'",
    datasetId,
  );
}

/**
 * Removes a store folder (files, and thumbs/ one level down). Plain unlink / rmdir is several times
 * faster than rm({ recursive }), which matters to callers that ingest many small files; rm is the fallback.
 */
async function removeTree(dir: string): Promise<void> {
  try {
    const entries = await readdir(dir, { withFileTypes: true });
    await Promise.all(entries.map((e) => (e.isDirectory() ? removeTree(join(dir, e.name)) : unlink(join(dir, e.name)))));
    await rmdir(dir);
  } catch {
    await rm(dir, { recursive: true, force: true });
  }
}

/**
 * Hex SHA-256 of the source, streamed. It runs alongside the reader rather than before it: both
 * read the same pages, so the second read is served from the page cache.
 */
async function sha256File(path: string, size: number, signal: AbortSignal): Promise<string> {
  const hash = createHash('sha256');
  for await (const chunk of createReadStream(path, { highWaterMark: streamChunkBytes(size), signal })) hash.update(chunk as Buffer);
  return hash.digest('hex');
}

async function writeMeta(path: string, text: string, durable: boolean): Promise<void> {
  const fh = await open(path, 'wx');
  try {
    await fh.writeFile(text, 'utf8');
    if (durable) await fh.sync();
  } finally {
    await fh.close();
  }
}

import { createHash } from 'node:crypto';
import { readFile } from 'node:fs/promises';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { deleteDataset, ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { defaultReadOptions } from '../../src/data/read-options.js';
import type { DatasetFormat } from '../../src/data/reader.js';
import { DATASET_FORMATS, loadReader } from '../../src/data/reader-registry.js';
import { buildTar, buildZip, png } from './archive-fixtures.js';
import { delimitedText, jsonlText, makeDataset, npyBytes, parquetBytes, type Dataset } from './fixtures.js';
import { nextId, scratch } from './store-helpers.js';

/**
 * Every reader, one dataset: the same 37 × 5 rows written in each format must come back as the
 * same float32 matrix (bit for bit), ids and labels. .npy has no ids (row numbers) and no labels.
 * Image archives cannot hold arbitrary floats, so their cases bring their own expected dataset:
 * black and white images, whose gray features are exactly 0 and 1 whatever the resampling.
 *
 * The table lists every format. Cases run only for readers that are installed (each is imported
 * on demand); the last test fails when an installed reader has no case, so a new reader cannot
 * skip conformance.
 */
interface CaseFile {
  name: string;
  bytes: Buffer | string;
  expected?: Dataset;
}

interface Case {
  name: string;
  format: DatasetFormat;
  /** File name (its extension drives format detection), bytes, and the dataset when not the shared one. */
  file: (ds: Dataset) => Promise<CaseFile> | CaseFile;
  ids: 'given' | 'row numbers';
  labels: boolean;
}

/** Six 8×8 black / white PNGs in folders cat/ and dog/, read as 2×2 gray: features are exactly 0 or 1. */
async function imageArchiveFiles(): Promise<{ entries: { name: string; data: Buffer }[]; expected: Dataset }> {
  const specs = [
    ['cat/a.png', 0],
    ['cat/b.png', 255],
    ['dog/c.png', 255],
    ['dog/d.png', 0],
    ['dog/e.png', 255],
    ['cat/f.png', 0],
  ] as const;
  const entries = await Promise.all(specs.map(async ([name, v]) => ({ name, data: await png(8, 8, [v, v, v]) })));
  const matrix = new Float32Array(specs.length * 4);
  specs.forEach(([, v], i) => matrix.fill(v / 255, i * 4, i * 4 + 4));
  return {
    entries,
    expected: { rows: specs.length, cols: 4, matrix, ids: specs.map(([name]) => name), labels: specs.map(([name]) => name.split('/')[0]) },
  };
}
const IMAGE_OPTIONS = { image: { size: 2, color: 'gray', fit: 'fill', onBadImage: 'fail' } } as const;

const f64 = (ds: Dataset) => Float64Array.from(ds.matrix);

const CASES: Case[] = [
  { name: 'npy <f4 v1.0', format: 'npy', file: (ds) => ({ name: 'a.npy', bytes: npyBytes(ds.matrix, [ds.rows, ds.cols]) }), ids: 'row numbers', labels: false },
  { name: 'npy <f8 v2.0', format: 'npy', file: (ds) => ({ name: 'b.npy', bytes: npyBytes(f64(ds), [ds.rows, ds.cols], { version: 2 }) }), ids: 'row numbers', labels: false },
  { name: 'npy <f4 v3.0', format: 'npy', file: (ds) => ({ name: 'c.npy', bytes: npyBytes(ds.matrix, [ds.rows, ds.cols], { version: 3 }) }), ids: 'row numbers', labels: false },
  { name: 'csv', format: 'csv', file: (ds) => ({ name: 'd.csv', bytes: delimitedText(ds, ',') }), ids: 'given', labels: true },
  { name: 'csv (CRLF, BOM)', format: 'csv', file: (ds) => ({ name: 'e.csv', bytes: '\uFEFF' + delimitedText(ds, ',').replaceAll('\n', '\r\n') }), ids: 'given', labels: true },
  { name: 'tsv', format: 'tsv', file: (ds) => ({ name: 'f.tsv', bytes: delimitedText(ds, '\t') }), ids: 'given', labels: true },
  { name: 'jsonl', format: 'jsonl', file: (ds) => ({ name: 'g.jsonl', bytes: jsonlText(ds) }), ids: 'given', labels: true },
  { name: 'ndjson (blank lines)', format: 'jsonl', file: (ds) => ({ name: 'h.ndjson', bytes: '\n' + jsonlText(ds).replaceAll('\n', '\n\n') }), ids: 'given', labels: true },
  { name: 'parquet list<float> snappy', format: 'parquet', file: (ds) => ({ name: 'i.parquet', bytes: parquetBytes(ds) }), ids: 'given', labels: true },
  {
    name: 'parquet list<double> gzip',
    format: 'parquet',
    file: (ds) => ({ name: 'j.parquet', bytes: parquetBytes(ds, { element: 'DOUBLE', codec: 'GZIP', rowGroupSize: 37 }) }),
    ids: 'given',
    labels: true,
  },
  {
    name: 'parquet float columns brotli',
    format: 'parquet',
    file: (ds) => ({ name: 'k.parquet', bytes: parquetBytes(ds, { layout: 'scalars', codec: 'BROTLI', rowGroupSize: 4 }) }),
    ids: 'given',
    labels: true,
  },
  {
    name: 'parquet double columns uncompressed',
    format: 'parquet',
    file: (ds) => ({ name: 'l.parquet', bytes: parquetBytes(ds, { layout: 'scalars', element: 'DOUBLE', codec: 'UNCOMPRESSED' }) }),
    ids: 'given',
    labels: true,
  },
  {
    name: 'zip of images',
    format: 'zip',
    file: async () => {
      const { entries, expected } = await imageArchiveFiles();
      return { name: 'm.zip', bytes: buildZip(entries), expected };
    },
    ids: 'given',
    labels: true,
  },
  {
    name: 'tar.gz of images',
    format: 'tar',
    file: async () => {
      const { entries, expected } = await imageArchiveFiles();
      return { name: 'n.tar.gz', bytes: await buildTar(entries, true), expected };
    },
    ids: 'given',
    labels: true,
  },
];

const installed = new Set<DatasetFormat>();
for (const format of DATASET_FORMATS) {
  if (await loadReader(format).then(() => true, () => false)) installed.add(format);
}
const runnable = CASES.filter((c) => installed.has(c.format));

describe('reader conformance', () => {
  const shared = makeDataset(37, 5, 7);
  let dir: Awaited<ReturnType<typeof scratch>>;
  beforeAll(async () => {
    dir = await scratch();
  });
  afterAll(async () => {
    await dir.cleanup();
  });

  it.each(runnable.map((c) => [c.name, c] as const))('%s reads back the same dataset', async (_, c) => {
    const { name, bytes, expected } = await c.file(shared);
    const ds = expected ?? shared;
    const path = await dir.input(name, bytes);
    const datasetId = nextId();
    const options = defaultReadOptions(c.format === 'zip' || c.format === 'tar' ? IMAGE_OPTIONS : {});
    // Format detection is part of the contract: no format is passed.
    const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options });
    const source = await readFile(path);
    expect(meta).toMatchObject({
      id: datasetId,
      rows: ds.rows,
      cols: ds.cols,
      format: c.format,
      sourceBytes: source.length,
      sha256: createHash('sha256').update(source).digest('hex'),
      hasLabels: c.labels,
      droppedNonFinite: 0,
      skippedImages: 0,
      version: 1,
    });

    const stored = openDataset(dir.storeDir, datasetId);
    expect(stored.meta).toEqual(meta);
    // Bit-for-bit: compare the bytes, so -0, subnormals and the last ulp all count.
    const matrix = stored.loadMatrix();
    expect(Buffer.from(matrix.buffer)).toEqual(Buffer.from(ds.matrix.buffer));
    const [start, count] = [Math.min(2, ds.rows - 1), Math.min(3, ds.rows - 2)];
    const slice = ds.matrix.slice(start * ds.cols, (start + count) * ds.cols);
    expect(Buffer.from(stored.readRows(start, count).buffer)).toEqual(Buffer.from(slice.buffer));

    const items = await stored.readItems();
    expect(items.ids).toEqual(c.ids === 'given' ? ds.ids : ds.ids.map((_, i) => String(i)));
    expect(items.labels).toEqual(c.labels ? ds.labels : ds.labels.map(() => null));

    await deleteDataset(dir.storeDir, datasetId);
    expect(() => openDataset(dir.storeDir, datasetId)).toThrow(expect.objectContaining({ code: 'DATASET_NOT_FOUND' }));
  });

  it('has a runnable case for every installed reader', () => {
    const covered = new Set(runnable.map((c) => c.format));
    const missing = [...installed].filter((format) => !covered.has(format));
    expect(missing, `installed readers without a conformance fixture: ${missing.join(', ')}`).toEqual([]);
  });
});

import { readdir, truncate, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { DatasetWriter } from '../../src/data/dataset-writer.js';
import { deleteDataset, ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { detectFormat } from '../../src/data/format-sniffer.js';
import { IdRegistry } from '../../src/data/id-registry.js';
import { DEFAULT_LIMITS, defaultReadOptions } from '../../src/data/read-options.js';
import { delimitedText, jsonlText, makeDataset, npyBytes, parquetBytes } from './fixtures.js';
import { expectIngestFailure, listStore, nextId, scratch } from './store-helpers.js';

let dir: Awaited<ReturnType<typeof scratch>>;
beforeAll(async () => {
  dir = await scratch();
});
afterAll(async () => {
  await dir.cleanup();
});

const ds = makeDataset(6, 2, 4);
const csv = delimitedText(ds);

describe('format detection', () => {
  it('prefers magic bytes, then the extension, then the text', async () => {
    const cases: [string, string | Buffer, string][] = [
      ['data.bin', npyBytes(ds.matrix, [6, 2]), 'npy'],
      ['data.csv', parquetBytes(ds), 'parquet'],
      ['x.tsv', 'a\tb\n1\t2\n', 'tsv'],
      ['x.ndjson', jsonlText(ds), 'jsonl'],
      ['x.txt', '  {"vector": [1]}\n', 'jsonl'],
      ['x.txt', 'a\tb\n1\t2\n', 'tsv'],
      ['x.dat', csv, 'csv'],
      ['x.tgz', Buffer.from([0x1f, 0x8b, 8, 0]), 'tar'],
      ['x.zip', Buffer.from('PK\x03\x04', 'latin1'), 'zip'],
    ];
    for (const [name, bytes, format] of cases) expect([name, await detectFormat(await dir.input(name, bytes))]).toEqual([name, format]);
  });

  it('UNSUPPORTED_FORMAT for unknown content and compressed text; nothing stored', async () => {
    await expectIngestFailure(await dir.input('x.txt', 'just words\n'), dir.storeDir, { code: 'UNSUPPORTED_FORMAT' });
    await expectIngestFailure(await dir.input('x.csv.gz', Buffer.from([0x1f, 0x8b, 8, 0])), dir.storeDir, { code: 'UNSUPPORTED_FORMAT' });
  });
});

describe('dataset store', () => {
  it('rejects bad ids and formats, missing sources, existing datasets; deletes and reports missing ones', async () => {
    const path = await dir.input('x.csv', csv);
    const options = defaultReadOptions();
    for (const datasetId of ['', '../x', '.hidden', 'a/b', 'x'.repeat(129)]) {
      await expect(ingestFile(path, { storeDir: dir.storeDir, datasetId, options })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    }
    await expect(ingestFile(path, { storeDir: dir.storeDir, datasetId: 'a', options, format: 'xls' as never })).rejects.toMatchObject({
      code: 'INVALID_ARGUMENT',
    });
    await expectIngestFailure(join(dir.root, 'missing.csv'), dir.storeDir, { code: 'DATASET_SOURCE_UNREADABLE', details: { source: 'missing.csv' } });
    await expectIngestFailure(dir.root, dir.storeDir, { code: 'DATASET_SOURCE_UNREADABLE' }, {}, 'csv');

    const datasetId = nextId();
    await ingestFile(path, { storeDir: dir.storeDir, datasetId, options });
    await expect(ingestFile(path, { storeDir: dir.storeDir, datasetId, options })).rejects.toMatchObject({ code: 'DATASET_ALREADY_EXISTS' });
    await deleteDataset(dir.storeDir, datasetId);
    await expect(deleteDataset(dir.storeDir, datasetId)).rejects.toMatchObject({ code: 'DATASET_NOT_FOUND' });
    expect(() => openDataset(dir.storeDir, 'never-stored')).toThrow(expect.objectContaining({ code: 'DATASET_NOT_FOUND' }));
    expect((await listStore(dir.storeDir)).filter((name) => name.startsWith('.'))).toEqual([]);
  });

  it('passes an explicit format over detection, reports progress, and honours cancellation', async () => {
    const path = await dir.input('data.bin', csv);
    const progress: { bytesRead: number; rows: number }[] = [];
    const meta = await ingestFile(path, {
      storeDir: dir.storeDir,
      datasetId: nextId(),
      format: 'csv',
      options: defaultReadOptions({ onProgress: (p) => progress.push(p) }),
    });
    expect(meta).toMatchObject({ format: 'csv', sourceName: expect.stringMatching(/-data\.bin$/), rows: 6 });
    expect(progress.at(-1)).toEqual({ bytesRead: Buffer.byteLength(csv), rows: 6 });
    const controller = new AbortController();
    controller.abort();
    await expectIngestFailure(path, dir.storeDir, { code: 'DATASET_INGEST_CANCELLED' }, { signal: controller.signal }, 'csv');
  });

  it('checks reads and reports damaged folders as DATASET_STORE_CORRUPT', async () => {
    const datasetId = nextId();
    await ingestFile(await dir.input('x.npy', npyBytes(ds.matrix, [6, 2])), { storeDir: dir.storeDir, datasetId, options: defaultReadOptions() });
    const stored = openDataset(dir.storeDir, datasetId);
    expect(Array.from(stored.readRows(5, 1))).toEqual(Array.from(ds.matrix.subarray(10, 12)));
    expect(stored.readRows(6, 0).length).toBe(0);
    expect(() => stored.readRows(5, 2)).toThrow(expect.objectContaining({ code: 'INVALID_ARGUMENT' }));
    expect(() => stored.readRows(-1, 1)).toThrow(expect.objectContaining({ code: 'INVALID_ARGUMENT' }));
    await truncate(join(stored.dir, 'matrix.f32'), 8);
    expect(() => stored.loadMatrix()).toThrow(expect.objectContaining({ code: 'DATASET_STORE_CORRUPT' }));
    await writeFile(join(stored.dir, 'items.jsonl'), '{"id":"a","label":null}\n');
    await expect(stored.readItems()).rejects.toMatchObject({ code: 'DATASET_STORE_CORRUPT' });
    await writeFile(join(stored.dir, 'meta.json'), '{');
    expect(() => openDataset(dir.storeDir, datasetId)).toThrow(expect.objectContaining({ code: 'DATASET_STORE_CORRUPT' }));
  });
});

describe('dataset writer and id registry', () => {
  it('finds duplicate ids across batches and within one, naming both rows', async () => {
    const folder = join(dir.root, 'writer');
    await import('node:fs/promises').then((fs) => fs.mkdir(folder));
    const writer = new DatasetWriter(folder);
    await writer.begin(1);
    await writer.writeRows(Float32Array.of(1, 2), 2, ['a', 'b'], [null, 'x']);
    await writer.writeRows(Float32Array.of(3), 1, ['c'], [null]);
    await expect(writer.writeRows(Float32Array.of(4, 5), 2, ['d', 'b'], [null, null])).rejects.toMatchObject({
      code: 'DATASET_DUPLICATE_ID',
      details: { row: 4, firstRow: 1 },
    });
    await writer.writeThumbnail(0, Buffer.from('png'));
    await writer.abort();
    expect((await readdir(folder)).sort()).toEqual(['items.jsonl', 'matrix.f32', 'thumbs']);
  });

  it('counts row-number ids without storing them, then switches to a set', () => {
    const ids = new IdRegistry();
    expect([ids.add('0', 0), ids.add('1', 1), ids.add('2', 2)]).toEqual([true, true, true]);
    expect(ids.add('x', 3)).toBe(true);
    expect(ids.add('1', 4)).toBe(false);
    expect(ids.prefixRow('1')).toBe(1);
    expect(ids.add('01', 5)).toBe(true);
    expect(ids.add('x', 6)).toBe(false);
  });

  it('completes read options from partial ones without erasing defaults', () => {
    const options = defaultReadOptions({ limits: { maxRows: 5, maxCols: undefined }, image: { size: 8 } });
    expect(options.limits).toEqual({ ...DEFAULT_LIMITS, maxRows: 5 });
    expect(options).toMatchObject({ nonFinite: 'fail', scaleUint8: true, image: { size: 8, color: 'rgb' } });
  });
});

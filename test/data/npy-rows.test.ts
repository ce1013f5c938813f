import { createHash } from 'node:crypto';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import { DenseRows } from '../../src/core/rows.js';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { closeRows, FileRows } from '../../src/data/file-rows.js';
import { openNpyRows, type NpyRows } from '../../src/data/npy-rows.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../../src/data/read-options.js';
import type { DatasetFormat } from '../../src/data/reader.js';
import { CairnError } from '../../src/errors.js';
import { npyBytes } from './fixtures.js';
import { nextId, scratch } from './store-helpers.js';

let dir: Awaited<ReturnType<typeof scratch>>;
beforeAll(async () => {
  dir = await scratch('cairn-npy-rows-');
});
afterAll(async () => {
  await dir.cleanup();
});

function normals(length: number, seed: number): Float32Array {
  const rng = new Rng(seed);
  return Float32Array.from({ length }, () => rng.normal());
}

/** A .npy without the 64-byte padding numpy writes: the data then starts at an odd offset. */
function unpaddedNpy(data: Float32Array, rows: number, cols: number): Buffer {
  const dict = Buffer.from(`{'descr': '<f4', 'fortran_order': False, 'shape': (${rows}, ${cols}), }\n`, 'latin1');
  const prefix = Buffer.from('\x93NUMPY\x01\x00\x00\x00', 'latin1');
  prefix.writeUInt16LE(dict.length, 8);
  return Buffer.concat([prefix, dict, Buffer.from(data.buffer, data.byteOffset, data.byteLength)]);
}

const open = (path: string, budgetBytes: number, read: ReadOptionOverrides = {}, format?: DatasetFormat) =>
  openNpyRows(path, { datasetId: 'input', options: defaultReadOptions(read), budgetBytes, format });

async function ingested(path: string, read: ReadOptionOverrides = {}) {
  const datasetId = nextId();
  const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options: defaultReadOptions(read) });
  return { meta, dataset: openDataset(dir.storeDir, datasetId) };
}

/** The error a promise rejects with, as code, message and details. */
async function failure(promise: Promise<unknown>): Promise<{ code: string; message: string; details: unknown }> {
  const err = await promise.then(
    () => expect.unreachable('expected a rejection'),
    (e: unknown) => e,
  );
  expect(err).toBeInstanceOf(CairnError);
  const { code, message, details } = err as CairnError;
  return { code, message, details };
}

describe('openNpyRows', () => {
  it('gives the rows, ids and meta that ingestion gives, in memory or read from the file, at aligned and odd data offsets', async () => {
    // 3,000 rows of 513 floats: two full 2 MiB chunks and a partial one.
    const rows = 3000;
    const cols = 513;
    const data = normals(rows * cols, 1);
    for (const bytes of [npyBytes(data, [rows, cols]), unpaddedNpy(data, rows, cols)]) {
      const path = await dir.input('points.npy', bytes);
      const { meta, dataset } = await ingested(path);
      const items = await dataset.readItems();
      const held = (await open(path, rows * cols * 4)) as NpyRows;
      const onDisk = (await open(path, rows * cols * 4 - 1)) as NpyRows;
      try {
        expect(held.rows).toBeInstanceOf(DenseRows);
        expect(onDisk.rows).toBeInstanceOf(FileRows);
        const stored = bytesOf(dataset.loadMatrix());
        expect(bytesOf((held.rows as DenseRows).data).equals(stored)).toBe(true);
        expect(bytesOf(onDisk.rows.read(0, rows)).equals(stored)).toBe(true);
        expect(onDisk.rows.gather([rows - 1, 7, 7, 1500])).toEqual(held.rows.gather([rows - 1, 7, 7, 1500]));
        for (const opened of [held, onDisk]) {
          const { createdAt, ...same } = opened.meta;
          expect(same).toEqual({ ...omitCreated(meta), id: 'input' });
          expect(Date.parse(createdAt)).not.toBeNaN();
          expect(opened.meta.sha256).toBe(createHash('sha256').update(bytes).digest('hex'));
          for (const r of [0, 1, 1234, rows - 1]) {
            expect(opened.items.id(r)).toBe(items.ids[r]);
            expect(opened.items.label(r)).toBe(items.labels[r]);
          }
          expect(() => opened.items.id(rows)).toThrow(RangeError);
        }
      } finally {
        closeRows(held.rows);
        closeRows(onDisk.rows);
      }
    }
  });

  it('recognises a .npy by its magic bytes, and leaves other formats, dtypes and rows to drop to ingestion', async () => {
    const data = normals(40, 2);
    const renamed = await dir.input('points.bin', npyBytes(data, [10, 4]));
    const byMagic = await open(renamed, Infinity);
    expect(byMagic?.rows.read(0, 10)).toEqual(data);
    expect(byMagic?.meta).toMatchObject({ format: 'npy', sourceName: renamed.split('/').pop(), rows: 10, cols: 4 });
    expect(await open(renamed, Infinity, {}, 'csv')).toBeNull();
    expect(await open(await dir.input('points.csv', 'a,b\n1,2\n'), Infinity)).toBeNull();
    expect(await open(await dir.input('f8.npy', npyBytes(Float64Array.from(data), [10, 4])), Infinity)).toBeNull();
    expect(await open(await dir.input('u1.npy', npyBytes(new Uint8Array(40), [10, 4])), Infinity)).toBeNull();
    // Dropping renumbers the rows: ingestion's business. Without anything to drop, nothing changes.
    const withNaN = Float32Array.from(data);
    withNaN[13] = NaN;
    const nanPath = await dir.input('nan.npy', npyBytes(withNaN, [10, 4]));
    expect(await open(nanPath, Infinity, { nonFinite: 'drop' })).toBeNull();
    expect(await open(nanPath, 0, { nonFinite: 'drop' })).toBeNull();
    expect((await open(renamed, Infinity, { nonFinite: 'drop' }))?.meta.droppedNonFinite).toBe(0);
  });

  it('rejects NaN and ±Infinity with the error ingestion gives (code, message, row and feature), in any chunk', async () => {
    const rows = 3000;
    const cols = 513;
    for (const [at, value] of [
      [5, NaN],
      [2100 * cols + 512, Infinity],
      [rows * cols - 1, -Infinity],
    ] as const) {
      const data = normals(rows * cols, 3);
      data[at] = value;
      const path = await dir.input('bad.npy', npyBytes(data, [rows, cols]));
      const expected = await failure(ingested(path));
      expect(expected).toMatchObject({ code: 'NON_FINITE_VALUE', details: { row: Math.floor(at / cols), feature: at % cols } });
      expect(await failure(open(path, Infinity))).toEqual(expected);
      expect(await failure(open(path, 0))).toEqual(expected);
    }
  });

  it('fails bad files and broken limits exactly as ingestion does', async () => {
    const data = Float32Array.from({ length: 12 }, (_, i) => i - 5.25);
    const good = npyBytes(data, [4, 3]);
    const cases: Array<[Buffer, ReadOptionOverrides, string]> = [
      [Buffer.from('not a numpy file at all'), {}, 'NPY_BAD_MAGIC'],
      [npyBytes(data, [4, 3], { header: `{'descr': '<f4', 'fortran_order': False}` }), {}, 'NPY_BAD_HEADER'],
      [npyBytes(data, [4, 3], { dtype: '>f4' }), {}, 'NPY_UNSUPPORTED_DTYPE'],
      [npyBytes(data, [4, 3], { fortran: true }), {}, 'NPY_FORTRAN_ORDER'],
      [npyBytes(data, [12]), {}, 'NPY_BAD_SHAPE'],
      [good.subarray(0, good.length - 1), {}, 'NPY_TRUNCATED'],
      [Buffer.concat([good, Buffer.from([0])]), {}, 'NPY_TRAILING_DATA'],
      [npyBytes(new Float32Array(0), [0, 3]), {}, 'DATASET_EMPTY'],
      [good, { limits: { maxFileBytes: 100 } }, 'DATASET_TOO_LARGE'],
      [good, { limits: { maxRows: 3 } }, 'DATASET_TOO_MANY_ROWS'],
      [good, { limits: { maxCols: 2 } }, 'DATASET_TOO_MANY_COLUMNS'],
    ];
    for (const [bytes, read, code] of cases) {
      // Named .npy, so that even a file without the magic string is taken for one, as ingestion takes it.
      const path = await dir.input('case.npy', bytes);
      const expected = await failure(ingested(path, read));
      expect(expected.code).toBe(code);
      expect(await failure(open(path, Infinity, read))).toEqual(expected);
      expect(await failure(open(path, Infinity, read, 'npy'))).toEqual(expected);
    }
    const missing = `${dir.root}/missing.npy`;
    expect(await failure(open(missing, Infinity))).toEqual(await failure(ingested(missing)));
  });
});

const bytesOf = (values: Float32Array): Buffer => Buffer.from(values.buffer, values.byteOffset, values.byteLength);

function omitCreated<T extends { createdAt: string }>(meta: T): Omit<T, 'createdAt'> {
  const { createdAt: _, ...rest } = meta;
  return rest;
}

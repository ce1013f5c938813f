import { parquetWriteBuffer, type SchemaElement } from 'hyparquet-writer';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../../src/data/read-options.js';
import type { ErrorCode } from '../../src/errors.js';
import { makeDataset, parquetBytes } from './fixtures.js';
import { expectIngestFailure, nextId, scratch } from './store-helpers.js';

let dir: Awaited<ReturnType<typeof scratch>>;
beforeAll(async () => {
  dir = await scratch();
});
afterAll(async () => {
  await dir.cleanup();
});

/** Column builders: each returns its data and schema elements. */
type Column = { name: string; data: unknown[]; schema: SchemaElement[] };
const text = (name: string, data: (string | null)[]): Column => ({
  name,
  data,
  schema: [{ name, type: 'BYTE_ARRAY', converted_type: 'UTF8', repetition_type: 'OPTIONAL' }],
});
const list = (name: string, data: (number[] | null)[], type: 'FLOAT' | 'DOUBLE' | 'INT32' = 'FLOAT', elementOptional = false): Column => ({
  name,
  data,
  schema: [
    { name, repetition_type: 'OPTIONAL', converted_type: 'LIST', num_children: 1 },
    { name: 'list', repetition_type: 'REPEATED', num_children: 1 },
    { name: 'element', type, repetition_type: elementOptional ? 'OPTIONAL' : 'REQUIRED' },
  ],
});
const scalar = (name: string, data: (number | null)[], type: 'FLOAT' | 'DOUBLE' | 'INT32' = 'DOUBLE'): Column => ({
  name,
  data,
  schema: [{ name, type, repetition_type: 'OPTIONAL' }],
});

function parquet(...columns: Column[]): Buffer {
  const schema: SchemaElement[] = [{ name: 'root', num_children: columns.length }, ...columns.flatMap((c) => c.schema)];
  return Buffer.from(parquetWriteBuffer({ columnData: columns.map(({ name, data }) => ({ name, data: data as never })), schema, statistics: false }));
}

async function fails(bytes: Buffer, code: ErrorCode, details?: Record<string, unknown>, overrides: ReadOptionOverrides = {}) {
  const path = await dir.input('x.parquet', bytes);
  await expectIngestFailure(path, dir.storeDir, { code, ...(details && { details }) }, overrides);
}

async function ingest(bytes: Buffer, overrides: ReadOptionOverrides = {}) {
  const path = await dir.input('x.parquet', bytes);
  const datasetId = nextId();
  const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options: defaultReadOptions(overrides) });
  const stored = openDataset(dir.storeDir, datasetId);
  return { meta, matrix: Array.from(stored.loadMatrix()), ...(await stored.readItems()) };
}

describe('parquet reader: accepted input', () => {
  it('reads integer lists, picks vectorField among several lists, and names id / label columns', async () => {
    const bytes = parquet(text('key', ['a', 'b']), list('emb', [[1, 2], [3, 4]], 'INT32'), list('other', [[9], [9]]), text('cls', ['x', null]));
    await fails(bytes, 'PARQUET_NO_VECTOR', { candidates: ['emb', 'other'] });
    const r = await ingest(bytes, { vectorField: 'emb', idField: 'key', labelField: 'cls' });
    expect(r).toMatchObject({ matrix: [1, 2, 3, 4], ids: ['a', 'b'], labels: ['x', null], meta: { hasLabels: true } });
  });

  it('without a list column, reads every float column other than id / label; ids default to row numbers', async () => {
    const r = await ingest(parquet(scalar('x', [1, 2]), text('name', ['p', 'q']), scalar('y', [3, 4], 'FLOAT'), scalar('n', [5, 6], 'INT32')));
    expect(r).toMatchObject({ matrix: [1, 3, 2, 4], ids: ['0', '1'], meta: { cols: 2, hasLabels: false } });
  });

  it('reads null elements and null scalars as NaN, dropped when asked', async () => {
    const r = await ingest(parquet(list('v', [[1, null as never], [2, 3]], 'FLOAT', true), scalar('w', [1, 2])), { nonFinite: 'drop' });
    expect(r).toMatchObject({ matrix: [2, 3], ids: ['1'], meta: { droppedNonFinite: 1 } });
    await fails(parquet(scalar('x', [1, null]), scalar('y', [3, 4])), 'NON_FINITE_VALUE', { row: 1, feature: 0 });
  });

  it('reads many row groups in order', async () => {
    const ds = makeDataset(250, 3, 3);
    const r = await ingest(parquetBytes(ds, { rowGroupSize: 7 }));
    expect(Float32Array.from(r.matrix)).toEqual(ds.matrix);
    expect(r.ids).toEqual(ds.ids);
  });
});

describe('parquet reader: error codes (and nothing left in the store)', () => {
  const good = parquetBytes(makeDataset(20, 3, 5));

  it('PARQUET_BAD_FILE for damaged files', async () => {
    await fails(Buffer.from('PAR1 this is not parquet PAR1'), 'PARQUET_BAD_FILE');
    await fails(good.subarray(0, good.length - 10), 'PARQUET_BAD_FILE');
    const cut = Buffer.concat([good.subarray(0, 8), good.subarray(40)]);
    await fails(cut, 'PARQUET_BAD_FILE');
  });

  it('PARQUET_UNKNOWN_COLUMN for named columns that are not there or are not scalar', async () => {
    await fails(good, 'PARQUET_UNKNOWN_COLUMN', { column: 'emb' }, { vectorField: 'emb' });
    await fails(good, 'PARQUET_UNKNOWN_COLUMN', { column: 'key' }, { idField: 'key' });
    await fails(good, 'PARQUET_UNKNOWN_COLUMN', { column: 'vector' }, { labelField: 'vector' });
  });

  it('PARQUET_NO_VECTOR when no column holds numbers', async () => {
    await fails(parquet(text('id', ['a']), text('label', ['b'])), 'PARQUET_NO_VECTOR');
    await fails(parquet(text('a', ['x']), scalar('b', [1])), 'PARQUET_NO_VECTOR', { column: 'a' }, { vectorField: 'a' });
  });

  it('PARQUET_RAGGED_VECTOR and PARQUET_NULL_VALUE name the row', async () => {
    await fails(parquet(list('v', [[1, 2], [3, 4], [5]])), 'PARQUET_RAGGED_VECTOR', { row: 2, expected: 2, got: 1 });
    await fails(parquet(list('v', [[1, 2], null])), 'PARQUET_NULL_VALUE', { row: 1, column: 'v' });
    await fails(parquet(text('id', ['a', null]), list('v', [[1], [2]])), 'PARQUET_NULL_VALUE', { row: 1, column: 'id' });
  });

  it('DATASET_DUPLICATE_ID and limits', async () => {
    await fails(parquet(text('id', ['a', 'b', 'a']), list('v', [[1], [2], [3]])), 'DATASET_DUPLICATE_ID', { row: 2, firstRow: 0 });
    await fails(good, 'DATASET_TOO_MANY_ROWS', { limit: 19, rows: 20 }, { limits: { maxRows: 19 } });
    await fails(good, 'DATASET_TOO_MANY_COLUMNS', { limit: 2 }, { limits: { maxCols: 2 } });
    await fails(good, 'DATASET_TOO_LARGE', { limit: 100 }, { limits: { maxFileBytes: 100 } });
  });
});

import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../../src/data/read-options.js';
import { parseNumericCell } from '../../src/data/numeric-cell.js';
import type { ErrorCode } from '../../src/errors.js';
import { expectIngestFailure, nextId, scratch } from './store-helpers.js';

let dir: Awaited<ReturnType<typeof scratch>>;
beforeAll(async () => {
  dir = await scratch();
});
afterAll(async () => {
  await dir.cleanup();
});

async function fails(text: string, code: ErrorCode, details?: Record<string, unknown>, overrides: ReadOptionOverrides = {}, name = 'x.csv') {
  const path = await dir.input(name, text);
  await expectIngestFailure(path, dir.storeDir, { code, ...(details && { details }) }, overrides);
}

async function ingest(text: string, overrides: ReadOptionOverrides = {}, name = 'x.csv') {
  const path = await dir.input(name, text);
  const datasetId = nextId();
  const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options: defaultReadOptions(overrides) });
  const stored = openDataset(dir.storeDir, datasetId);
  return { meta, matrix: Array.from(stored.loadMatrix()), ...(await stored.readItems()) };
}

describe('numeric cells', () => {
  it('parses decimals and the usual NaN / Infinity spellings; rejects the rest', () => {
    expect(parseNumericCell(' -1.5e3 ')).toBe(-1500);
    expect(parseNumericCell('.5')).toBe(0.5);
    expect(parseNumericCell('')).toBeNaN();
    expect(parseNumericCell('NaN')).toBeNaN();
    expect(parseNumericCell('-inf')).toBe(-Infinity);
    expect(parseNumericCell('Infinity')).toBe(Infinity);
    for (const bad of ['abc', '0x10', '0b1', '1,5', '1_000', '--1', 'NA']) expect(parseNumericCell(bad)).toBeUndefined();
  });
});

describe('csv reader: accepted input', () => {
  it('uses `id` and `label` columns wherever they are, features in column order', async () => {
    const r = await ingest('f0,label,id,f1\n1,a,x,2\n3,,y,4\n');
    expect(r).toMatchObject({ matrix: [1, 2, 3, 4], ids: ['x', 'y'], labels: ['a', null], meta: { hasLabels: true, cols: 2 } });
  });

  it('without an id column, ids are row numbers; idField / labelField pick other columns', async () => {
    expect((await ingest('a,b\n1,2\n3,4\n')).ids).toEqual(['0', '1']);
    const r = await ingest('name,kind,v\np,k1,1\nq,k2,2\n', { idField: 'name', labelField: 'kind' });
    expect(r).toMatchObject({ matrix: [1, 2], ids: ['p', 'q'], labels: ['k1', 'k2'] });
  });

  it('handles quoted cells with delimiters and newlines, blank lines, CRLF and TSV', async () => {
    const r = await ingest('id,v,label\r\n"a,1",1,"two\nlines"\r\n\r\n"b ""q""",2,x\r\n');
    expect(r).toMatchObject({ ids: ['a,1', 'b "q"'], labels: ['two\nlines', 'x'], matrix: [1, 2] });
    expect((await ingest('id\tv\na\t1.5\n', {}, 'x.tsv')).matrix).toEqual([1.5]);
  });

  it('accepts the header pandas writes for DataFrame(array).to_csv(index=False)', async () => {
    expect((await ingest('0,1,2\n1,2,3\n')).matrix).toEqual([1, 2, 3]);
  });

  it('reads empty cells as NaN: dropped and counted when asked', async () => {
    const r = await ingest('v,w\n1,2\n,4\nnan,5\n6,inf\n7,8\n', { nonFinite: 'drop' });
    expect(r).toMatchObject({ matrix: [1, 2, 7, 8], ids: ['0', '4'], meta: { droppedNonFinite: 3 } });
  });
});

describe('csv reader: error codes (and nothing left in the store)', () => {
  it('CSV_RAGGED_ROW names the row and line', async () => {
    await fails('id,a,b\nx,1,2\ny,3,4\nz,5\n', 'CSV_RAGGED_ROW', { row: 2, line: 4, expected: 3, got: 2 });
    await fails('a,b\n1,2\n3,4,5\n', 'CSV_RAGGED_ROW', { row: 1 });
  });

  it('CSV_NON_NUMERIC names the row and column, not the cell', async () => {
    const path = await dir.input('x.csv', 'id,a,b\nx,1,2\ny,3,secret\n');
    const failure = ingestFile(path, { storeDir: dir.storeDir, datasetId: nextId(), options: defaultReadOptions() });
    await expect(failure).rejects.toMatchObject({ code: 'CSV_NON_NUMERIC', details: { row: 1, line: 3, column: 'b' } });
    await expect(failure).rejects.not.toHaveProperty('message', expect.stringContaining('secret'));
    await fails('a\n0x1F\n', 'CSV_NON_NUMERIC', { row: 0, column: 'a' });
  });

  it('CSV_UNKNOWN_COLUMN for named id / label columns that are not there', async () => {
    await fails('a,b\n1,2\n', 'CSV_UNKNOWN_COLUMN', { column: 'key' }, { idField: 'key' });
    await fails('a,b\n1,2\n', 'CSV_UNKNOWN_COLUMN', { column: 'cls' }, { labelField: 'cls' });
  });

  it('CSV_DUPLICATE_COLUMN, CSV_MISSING_HEADER, CSV_MALFORMED', async () => {
    await fails('a,b,a\n1,2,3\n', 'CSV_DUPLICATE_COLUMN', { column: 'a' });
    await fails('1,2,3\n4,5,6\n', 'CSV_MISSING_HEADER');
    await fails('id,a\n"x,1\n', 'CSV_MALFORMED');
    await fails('id,a\nx,1\ny"q"z,2\n', 'CSV_MALFORMED', { line: 3, reason: 'INVALID_OPENING_QUOTE' });
  });

  it('NON_FINITE_VALUE by default, with row and line', async () => {
    await fails('a,b\n1,2\n3,NaN\n', 'NON_FINITE_VALUE', { row: 1, line: 3, feature: 1 });
    await fails('a,b\n1,2\n3,\n', 'NON_FINITE_VALUE', { row: 1 });
    await fails('a\n1e39\n', 'NON_FINITE_VALUE', { row: 0 });
  });

  it('DATASET_EMPTY, DATASET_NO_FEATURES, DATASET_DUPLICATE_ID, DATASET_BAD_ID', async () => {
    await fails('', 'DATASET_EMPTY');
    await fails('a,b\n', 'DATASET_EMPTY');
    await fails('a,b\nnan,1\n', 'DATASET_EMPTY', { droppedNonFinite: 1 }, { nonFinite: 'drop' });
    await fails('id,label\nx,y\n', 'DATASET_NO_FEATURES');
    await fails('id,v\na,1\nb,2\nc,3\nb,4\n', 'DATASET_DUPLICATE_ID', { row: 3, firstRow: 1 });
    await fails('id,v\n0,1\n1,2\n2,3\n1,4\n', 'DATASET_DUPLICATE_ID', { row: 3, firstRow: 1 });
    await fails('id,v\na,1\n ,2\n', 'DATASET_BAD_ID', { row: 1 });
    await fails(`id,v\n${'x'.repeat(513)},1\n`, 'DATASET_BAD_ID', { row: 0 });
  });

  it('limits: rows, columns and file size', async () => {
    await fails('a,b\n1,2\n3,4\n5,6\n', 'DATASET_TOO_MANY_ROWS', { limit: 2 }, { limits: { maxRows: 2 } });
    await fails('a,b,c\n1,2,3\n', 'DATASET_TOO_MANY_COLUMNS', { limit: 2 }, { limits: { maxCols: 2 } });
    await fails('a,b,c\n1,2,3\n', 'DATASET_TOO_LARGE', { limit: 5 }, { limits: { maxFileBytes: 5 } });
  });
});

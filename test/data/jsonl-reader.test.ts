import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { readLines } from '../../src/data/line-splitter.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../../src/data/read-options.js';
import type { ErrorCode } from '../../src/errors.js';
import { expectIngestFailure, nextId, scratch } from './store-helpers.js';

let dir: Awaited<ReturnType<typeof scratch>>;
beforeAll(async () => {
  dir = await scratch();
});
afterAll(async () => {
  await dir.cleanup();
});

const lines = (...records: unknown[]) => records.map((r) => (typeof r === 'string' ? r : JSON.stringify(r))).join('\n') + '\n';

async function fails(text: string, code: ErrorCode, details?: Record<string, unknown>, overrides: ReadOptionOverrides = {}) {
  const path = await dir.input('x.jsonl', text);
  await expectIngestFailure(path, dir.storeDir, { code, ...(details && { details }) }, overrides);
}

async function ingest(text: string, overrides: ReadOptionOverrides = {}) {
  const path = await dir.input('x.jsonl', text);
  const datasetId = nextId();
  const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options: defaultReadOptions(overrides) });
  const stored = openDataset(dir.storeDir, datasetId);
  return { meta, matrix: Array.from(stored.loadMatrix()), ...(await stored.readItems()) };
}

describe('jsonl reader: accepted input', () => {
  it('reads id, vector and optional label; numbers and booleans as labels become text', async () => {
    const r = await ingest(lines({ id: 'a', vector: [1, 2], label: 'x' }, { id: 7, vector: [3, 4] }, { id: 'c', vector: [5, 6], label: 2 }));
    expect(r).toMatchObject({ matrix: [1, 2, 3, 4, 5, 6], ids: ['a', '7', 'c'], labels: ['x', null, '2'], meta: { hasLabels: true } });
  });

  it('uses vectorField / idField / labelField; without ids, ids are row numbers', async () => {
    const r = await ingest(lines({ key: 'p', emb: [1], cls: 'k' }, { key: 'q', emb: [2], cls: 'l' }), {
      vectorField: 'emb',
      idField: 'key',
      labelField: 'cls',
    });
    expect(r).toMatchObject({ ids: ['p', 'q'], labels: ['k', 'l'] });
    expect((await ingest(lines({ vector: [1] }, { vector: [2] }))).ids).toEqual(['0', '1']);
  });

  it("reads null and Python's bare NaN / Infinity as non-finite, outside strings only", async () => {
    const text = lines('{"id": "NaN x", "vector": [NaN, 1]}', '{"id": "b", "vector": [1, -Infinity]}', { id: 'c', vector: [null, 1] }, { id: 'd', vector: [2, 3] });
    const r = await ingest(text, { nonFinite: 'drop' });
    expect(r).toMatchObject({ ids: ['d'], matrix: [2, 3], meta: { droppedNonFinite: 3 } });
    await fails(text, 'NON_FINITE_VALUE', { row: 0, line: 1, feature: 0 });
  });

  it('splits long files and lines across chunks, and limits line length', async () => {
    const many = Array.from({ length: 3000 }, (_, i) => ({ id: `i${i}`, vector: Array.from({ length: 64 }, (_, j) => i + j / 64) }));
    const r = await ingest(lines(...many));
    expect(r.ids.length).toBe(3000);
    expect(r.matrix[2999 * 64 + 63]).toBe(Math.fround(2999 + 63 / 64));
    const path = await dir.input('long.jsonl', 'short\n' + 'x'.repeat(5000) + '\n');
    const read = async () => {
      for await (const _ of readLines(path, 4096));
    };
    await expect(read()).rejects.toMatchObject({ code: 'DATASET_RECORD_TOO_LARGE', details: { line: 2, limit: 4096 } });
  });
});

describe('jsonl reader: error codes (and nothing left in the store)', () => {
  it('JSONL_BAD_LINE for bad JSON and for values that are not objects', async () => {
    await fails(lines({ id: 'a', vector: [1] }, '{"id": "b", "vector": [1]'), 'JSONL_BAD_LINE', { line: 2 });
    await fails(lines({ id: 'a', vector: [1] }, '', '[1, 2]'), 'JSONL_BAD_LINE', { line: 3 });
    await fails(lines('null'), 'JSONL_BAD_LINE', { line: 1 });
  });

  it('JSONL_MISSING_VECTOR, JSONL_BAD_VECTOR, JSONL_RAGGED_VECTOR name the line', async () => {
    await fails(lines({ id: 'a', vector: [1] }, { id: 'b' }), 'JSONL_MISSING_VECTOR', { line: 2, row: 1 });
    await fails(lines({ id: 'a', vector: [1] }), 'JSONL_MISSING_VECTOR', { line: 1, field: 'constructor' }, { vectorField: 'constructor' });
    await fails(lines({ id: 'a', vector: '1,2' }), 'JSONL_BAD_VECTOR', { line: 1 });
    await fails(lines({ id: 'a', vector: [1, '2'] }), 'JSONL_BAD_VECTOR', { line: 1, index: 1 });
    await fails(lines({ id: 'a', vector: [1, 2] }, { id: 'b', vector: [1] }), 'JSONL_RAGGED_VECTOR', { line: 2, expected: 2, got: 1 });
  });

  it('JSONL_BAD_FIELD for ids missing, appearing late or of the wrong type, and bad labels', async () => {
    await fails(lines({ id: 'a', vector: [1] }, { vector: [2] }), 'JSONL_BAD_FIELD', { line: 2, field: 'id' });
    await fails(lines({ vector: [1] }, { id: 'b', vector: [2] }), 'JSONL_BAD_FIELD', { line: 2, field: 'id' });
    await fails(lines({ id: ['a'], vector: [1] }), 'JSONL_BAD_FIELD', { line: 1, field: 'id' });
    await fails(lines({ vector: [1] }), 'JSONL_BAD_FIELD', { field: 'key' }, { idField: 'key' });
    await fails(lines({ id: 'a', vector: [1], label: { x: 1 } }), 'JSONL_BAD_FIELD', { field: 'label' });
  });

  it('DATASET_EMPTY, DATASET_NO_FEATURES, DATASET_DUPLICATE_ID, limits', async () => {
    await fails('\n\n', 'DATASET_EMPTY');
    await fails(lines({ id: 'a', vector: [] }), 'DATASET_NO_FEATURES');
    await fails(lines({ id: 'a', vector: [1] }, { id: 'b', vector: [1] }, { id: 'a', vector: [1] }), 'DATASET_DUPLICATE_ID', { row: 2, firstRow: 0 });
    await fails(lines({ id: 1, vector: [1] }, { id: '1', vector: [1] }), 'DATASET_DUPLICATE_ID', { row: 1, firstRow: 0 });
    await fails(lines({ vector: [1, 2, 3] }), 'DATASET_TOO_MANY_COLUMNS', { limit: 2 }, { limits: { maxCols: 2 } });
    await fails(lines({ vector: [1] }, { vector: [1] }), 'DATASET_TOO_MANY_ROWS', { limit: 1 }, { limits: { maxRows: 1 } });
  });
});

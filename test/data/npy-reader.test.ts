import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { defaultReadOptions } from '../../src/data/read-options.js';
import { npyBytes } from './fixtures.js';
import { expectIngestFailure, nextId, scratch } from './store-helpers.js';

let dir: Awaited<ReturnType<typeof scratch>>;
beforeAll(async () => {
  dir = await scratch();
});
afterAll(async () => {
  await dir.cleanup();
});

const data = Float32Array.from({ length: 12 }, (_, i) => i - 5.25);
const good = () => npyBytes(data, [4, 3]);
/** A well-formed file whose header dict text is `dict`. */
const withHeader = (dict: string) => npyBytes(data, [4, 3], { header: dict });

async function fails(bytes: Buffer, code: string, details?: Record<string, unknown>, overrides = {}) {
  const path = await dir.input('x.npy', bytes);
  await expectIngestFailure(path, dir.storeDir, { code: code as never, ...(details && { details }) }, overrides);
}

async function ingest(bytes: Buffer, overrides = {}) {
  const path = await dir.input('x.npy', bytes);
  const datasetId = nextId();
  const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options: defaultReadOptions(overrides) });
  return { meta, stored: openDataset(dir.storeDir, datasetId) };
}

describe('npy reader: accepted input', () => {
  it('reads uint8, scaled to 0..1 by default or kept as 0..255', async () => {
    const bytes = npyBytes(Uint8Array.from([0, 51, 255, 1]), [2, 2]);
    expect(Array.from((await ingest(bytes)).stored.loadMatrix())).toEqual([0, 0.2, 1, 1 / 255].map(Math.fround));
    expect(Array.from((await ingest(bytes, { scaleUint8: false })).stored.loadMatrix())).toEqual([0, 51, 255, 1]);
  });

  it('accepts Python 2 headers (long integers), double quotes and no trailing comma', async () => {
    const { stored } = await ingest(withHeader(`{"descr": "<f4", "fortran_order": False, "shape": (4L, 3L)}`));
    expect(Array.from(stored.loadMatrix())).toEqual(Array.from(data));
  });

  it('reads more rows than one 4 MiB chunk, in order', async () => {
    const rows = 9000;
    const big = Float32Array.from({ length: rows * 128 }, (_, i) => (i % 977) - 400.5);
    const { meta, stored } = await ingest(npyBytes(big, [rows, 128]));
    expect(meta.rows).toBe(rows);
    expect(Buffer.from(stored.loadMatrix().buffer).equals(Buffer.from(big.buffer))).toBe(true);
  });

  it('drops rows with NaN or Infinity when asked, and counts them', async () => {
    const values = Float64Array.from([1, 2, NaN, 4, Infinity, 6, 7, 8]);
    const { meta, stored } = await ingest(npyBytes(values, [4, 2]), { nonFinite: 'drop' });
    expect(meta).toMatchObject({ rows: 2, droppedNonFinite: 2 });
    expect(Array.from(stored.loadMatrix())).toEqual([1, 2, 7, 8]);
    expect((await stored.readItems()).ids).toEqual(['0', '3']);
  });
});

describe('npy reader: error codes (and nothing left in the store)', () => {
  it('NPY_BAD_MAGIC', async () => {
    await fails(Buffer.from('not a numpy file at all'), 'NPY_BAD_MAGIC', undefined);
    await fails(Buffer.from('\x93NUM', 'latin1'), 'NPY_BAD_MAGIC');
  });

  it('NPY_BAD_HEADER for unparseable or wrong dicts, never evaluating them', async () => {
    for (const dict of [
      `{'descr': '<f4', 'fortran_order': False, 'shape': (4, 3)`,
      `{'descr': '<f4', 'fortran_order': False}`,
      `{'descr': '<f4', 'fortran_order': False, 'shape': (4, 3), 'extra': 1}`,
      `{'descr': '<f4', 'fortran_order': 0, 'shape': (4, 3)}`,
      `{'descr': '<f4', 'fortran_order': False, 'shape': (4.0, 3)}`,
      `{'descr': '<f4', 'fortran_order': False, 'shape': (-4, 3)}`,
      `{'descr': __import__('os').system('false'), 'fortran_order': False, 'shape': (4, 3)}`,
      `['descr', '<f4']`,
      '(' .repeat(100) + ')'.repeat(100),
    ]) {
      await fails(withHeader(dict), 'NPY_BAD_HEADER');
    }
    const badVersion = good();
    badVersion[6] = 9;
    await fails(badVersion, 'NPY_BAD_HEADER');
    const hugeHeader = good();
    hugeHeader[8] = 0xff;
    hugeHeader[9] = 0xff; // 65,535 bytes: longer than the file
    await fails(hugeHeader, 'NPY_TRUNCATED');
    const v2 = npyBytes(data, [4, 3], { version: 2 });
    v2.writeUInt32LE(1 << 20, 8);
    await fails(v2, 'NPY_BAD_HEADER');
  });

  it('NPY_UNSUPPORTED_DTYPE for big-endian, half, object and structured arrays', async () => {
    for (const descr of ['>f4', '>f8', '<f2', '|O', '<i8']) {
      await fails(withHeader(`{'descr': '${descr}', 'fortran_order': False, 'shape': (4, 3), }`), 'NPY_UNSUPPORTED_DTYPE', { dtype: descr });
    }
    await fails(withHeader(`{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (4, 3), }`), 'NPY_UNSUPPORTED_DTYPE');
  });

  it('NPY_FORTRAN_ORDER', async () => {
    await fails(npyBytes(data, [4, 3], { fortran: true }), 'NPY_FORTRAN_ORDER');
  });

  it('NPY_BAD_SHAPE for 1-D, 3-D and zero-column arrays', async () => {
    await fails(npyBytes(data, [12]), 'NPY_BAD_SHAPE', { shape: [12] });
    await fails(npyBytes(data, [2, 2, 3]), 'NPY_BAD_SHAPE', { shape: [2, 2, 3] });
    await fails(npyBytes(new Float32Array(0), [4, 0]), 'NPY_BAD_SHAPE');
  });

  it('NPY_TRUNCATED and NPY_TRAILING_DATA when the size does not match the header', async () => {
    await fails(good().subarray(0, good().length - 1), 'NPY_TRUNCATED', { expectedBytes: 48, actualBytes: 47 });
    await fails(good().subarray(0, 20), 'NPY_TRUNCATED');
    await fails(Buffer.concat([good(), Buffer.from([0])]), 'NPY_TRAILING_DATA', { expectedBytes: 48, actualBytes: 49 });
  });

  it('DATASET_EMPTY for zero rows', async () => {
    await fails(npyBytes(new Float32Array(0), [0, 3]), 'DATASET_EMPTY');
  });

  it('limits: DATASET_TOO_LARGE, DATASET_TOO_MANY_ROWS, DATASET_TOO_MANY_COLUMNS with the limit', async () => {
    await fails(good(), 'DATASET_TOO_LARGE', { limit: 100 }, { limits: { maxFileBytes: 100 } });
    await fails(good(), 'DATASET_TOO_MANY_ROWS', { limit: 3 }, { limits: { maxRows: 3 } });
    await fails(good(), 'DATASET_TOO_MANY_COLUMNS', { limit: 2, cols: 3 }, { limits: { maxCols: 2 } });
  });

  it('NON_FINITE_VALUE names the row, also for float64 values beyond float32 range', async () => {
    await fails(npyBytes(Float32Array.from([1, 2, 3, NaN]), [2, 2]), 'NON_FINITE_VALUE', { row: 1, feature: 1 });
    await fails(npyBytes(Float64Array.from([1, 1e39, 3, 4]), [2, 2]), 'NON_FINITE_VALUE', { row: 0, feature: 1 });
  });
});

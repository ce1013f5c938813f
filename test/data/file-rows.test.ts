import { mkdtempSync, rmSync, truncateSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import { DenseRows } from '../../src/core/rows.js';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { closeRows, FileRows, openRows } from '../../src/data/file-rows.js';
import { defaultReadOptions } from '../../src/data/read-options.js';
import { npyBytes } from './fixtures.js';

const dir = mkdtempSync(join(tmpdir(), 'cairn-file-rows-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

function matrixFile(name: string, rows: number, cols: number, seed: number): { path: string; data: Float32Array } {
  const rng = new Rng(seed);
  const data = Float32Array.from({ length: rows * cols }, () => rng.normal());
  const path = join(dir, name);
  writeFileSync(path, new Uint8Array(data.buffer));
  return { path, data };
}

describe('FileRows', () => {
  const rows = 500;
  const cols = 7;
  const { path, data } = matrixFile('m.f32', rows, cols, 1);
  const dense = new DenseRows(data, rows, cols);

  it('reads and gathers exactly the rows of the same matrix in memory', () => {
    const file = new FileRows(path, rows, cols);
    try {
      expect(file.resident).toBe(false);
      expect(file.read(0, rows)).toEqual(dense.read(0, rows));
      expect(file.read(123, 45)).toEqual(dense.read(123, 45));
      expect(file.read(rows, 0)).toEqual(new Float32Array(0));
      const rng = new Rng(2);
      // Scattered rows, runs of consecutive rows (in and out of order), repeats, the last row.
      const cases = [Array.from(rng.sample(rows, 60)), [10, 11, 12, 13, 40, 41, 5, 6, 7], [9, 8, 7, 6], [3, 3, 3, 4, 4, 2], [rows - 1, 0, rows - 1], []];
      for (const idx of cases) expect(file.gather(idx)).toEqual(dense.gather(idx));
      const into = new Float32Array(4 * cols).fill(NaN);
      expect(file.gather([7, 8, 100, 7], into)).toBe(into);
      expect(into).toEqual(dense.gather([7, 8, 100, 7]));
    } finally {
      file.close();
    }
  });

  it('rejects rows outside the matrix, a file of another size, and reads after close', () => {
    const file = new FileRows(path, rows, cols);
    expect(() => file.read(rows - 1, 2)).toThrow(RangeError);
    expect(() => file.gather([0, rows])).toThrow(RangeError);
    expect(() => file.gather([-1])).toThrow(RangeError);
    file.close();
    expect(() => file.read(0, 1)).toThrow(/closed/);
    file.close(); // twice is harmless
    expect(() => new FileRows(path, rows + 1, cols)).toThrow(RangeError);
  });

  it('reads rows that start at a byte offset (a header before them), aligned or not', () => {
    for (const offset of [128, 77]) {
      const header = Buffer.alloc(offset, 0xab);
      const shifted = join(dir, `offset-${offset}.bin`);
      writeFileSync(shifted, Buffer.concat([header, Buffer.from(data.buffer, data.byteOffset, data.byteLength)]));
      const file = new FileRows(shifted, rows, cols, offset);
      try {
        expect(file.dataOffset).toBe(offset);
        expect(file.read(0, rows)).toEqual(dense.read(0, rows));
        expect(file.read(rows - 3, 3)).toEqual(dense.read(rows - 3, 3));
        expect(file.gather([rows - 1, 0, 1, 2, 250, 250])).toEqual(dense.gather([rows - 1, 0, 1, 2, 250, 250]));
      } finally {
        file.close();
      }
      // The size must be the offset plus the rows exactly; the offset is not read as data.
      expect(() => new FileRows(shifted, rows, cols)).toThrow(RangeError);
      expect(() => new FileRows(shifted, rows, cols, offset - 4)).toThrow(/after 73 header bytes|after 124 header bytes/);
      expect(() => new FileRows(shifted, rows - 1, cols, offset)).toThrow(RangeError);
    }
    const plain = new FileRows(path, rows, cols);
    expect(plain.dataOffset).toBe(0);
    plain.close();
  });

  it('openRows holds the matrix in memory when it fits the budget, else reads the file', () => {
    const held = openRows(path, rows, cols, rows * cols * 4);
    expect(held).toBeInstanceOf(DenseRows);
    expect(held.read(0, rows)).toEqual(data);
    const onDisk = openRows(path, rows, cols, rows * cols * 4 - 1);
    expect(onDisk).toBeInstanceOf(FileRows);
    expect(onDisk.gather([4, 2])).toEqual(dense.gather([4, 2]));
    closeRows(onDisk);
    closeRows(held);
  });
});

describe('StoredDataset.rowSource and readItemsAt', () => {
  it('gives the stored matrix in memory or from the file, ids of chosen rows, and coded errors for missing or damaged files', async () => {
    const { data } = matrixFile('unused.f32', 300, 4, 3);
    const npy = join(dir, 'points.npy');
    writeFileSync(npy, npyBytes(data, [300, 4]));
    const storeDir = join(dir, 'store');
    await ingestFile(npy, { storeDir, datasetId: 'ds', options: defaultReadOptions({}) });
    const dataset = openDataset(storeDir, 'ds');
    const held = dataset.rowSource();
    const file = dataset.rowSource(0);
    try {
      expect(held).toBeInstanceOf(DenseRows);
      expect(file).toBeInstanceOf(FileRows);
      expect(file.read(0, 300)).toEqual(dataset.loadMatrix());
      expect(held.read(0, 300)).toEqual(dataset.loadMatrix());
    } finally {
      closeRows(file);
    }
    // Ids of some rows only, the same as in the full list.
    const all = await dataset.readItems();
    const some = await dataset.readItemsAt([299, 0, 17, 17]);
    for (const r of [0, 17, 299]) {
      expect(some.id(r)).toBe(all.ids[r]);
      expect(some.label(r)).toBe(all.labels[r]);
    }
    expect(() => some.id(5)).toThrow(RangeError);
    writeFileSync(join(dataset.dir, 'items.jsonl'), '{"id":"a","label":null}\n');
    await expect(dataset.readItemsAt([0])).rejects.toMatchObject({ code: 'DATASET_STORE_CORRUPT' });
    truncateSync(join(dataset.dir, 'matrix.f32'), 100);
    expect(() => dataset.rowSource(0)).toThrow(expect.objectContaining({ code: 'DATASET_STORE_CORRUPT' }));
    rmSync(join(dataset.dir, 'matrix.f32'));
    expect(() => dataset.rowSource(0)).toThrow(expect.objectContaining({ code: 'DATASET_NOT_FOUND' }));
  });
});

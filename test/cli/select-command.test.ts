import { createHash } from 'node:crypto';
import { mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { buildProgram } from '../../src/cli/program.js';
import { runSelectCommand, type CliResult, type SelectCommandInput } from '../../src/cli/select-command.js';
import { Rng } from '../../src/core/random.js';
import { buildTar, png } from '../data/archive-fixtures.js';
import { npyBytes } from '../data/fixtures.js';

const dir = mkdtempSync(join(tmpdir(), 'cairn-cli-test-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** Three clusters in 4-D; labels name the cluster. */
const rows = 300;
const cols = 4;
const rng = new Rng(8);
const matrix = new Float32Array(rows * cols);
const labels: string[] = [];
for (let i = 0; i < rows; i++) {
  const c = i % 3;
  labels.push(['north', 'east', 'south'][c]);
  for (let t = 0; t < cols; t++) matrix[i * cols + t] = (t === c ? 6 : 0) + rng.normal();
}
const ids = Array.from({ length: rows }, (_, i) => `part-${i}`);

async function runCli(args: string[]): Promise<CliResult> {
  const out = join(dir, `result-${Math.random().toString(36).slice(2)}.json`);
  await buildProgram().exitOverride().parseAsync(['node', 'cairn', 'select', ...args, '--out', out, '--quiet', '--iterations', '150']);
  return JSON.parse(readFileSync(out, 'utf8')) as CliResult;
}

const leftovers = (): string[] => readdirSync(tmpdir()).filter((n) => n.startsWith('cairn-select-'));

describe('cairn select', () => {
  const before = leftovers();

  it('selects from .npy and writes the documented result', async () => {
    const file = join(dir, 'points.npy');
    writeFileSync(file, npyBytes(matrix, [rows, cols]));
    const r = await runCli([file, '--k', '6', '--seed', '3']);
    expect(r.representatives).toHaveLength(6);
    for (const rep of r.representatives) {
      expect(rep.index).toBeGreaterThanOrEqual(0);
      expect(rep.index).toBeLessThan(rows);
      expect(rep.id).toBe(String(rep.index)); // .npy ids are row numbers
    }
    expect(r.representatives.reduce((a, b) => a + b.weight, 0)).toBeCloseTo(1, 9);
    expect(r.representatives.reduce((a, b) => a + b.share, 0)).toBeCloseTo(1, 9);
    expect(r.dataset).toMatchObject({ format: 'npy', rows, cols, source: 'points.npy' });
    expect(r.discrepancy.ratioToRandom).toBeLessThan(1);
    expect(r.coverage.worstCovered.length).toBeGreaterThan(0);
  });

  it('reads CSV ids and labels and gives the same selection as the same numbers in .npy', async () => {
    const csv = join(dir, 'points.csv');
    const lines = ['id,f0,f1,f2,f3,label', ...ids.map((id, i) => [id, ...Array.from(matrix.subarray(i * cols, i * cols + cols)), labels[i]].join(','))];
    writeFileSync(csv, lines.join('\n') + '\n');
    const npy = join(dir, 'same.npy');
    writeFileSync(npy, npyBytes(matrix, [rows, cols]));
    const fromCsv = await runCli([csv, '--k', '6', '--seed', '3']);
    const fromNpy = await runCli([npy, '--k', '6', '--seed', '3']);
    expect(fromCsv.representatives.map((r) => r.index)).toEqual(fromNpy.representatives.map((r) => r.index));
    for (const rep of fromCsv.representatives) {
      expect(rep.id).toBe(ids[rep.index]);
      expect(rep.label).toBe(labels[rep.index]);
    }
    // Labels only score the result: all three clusters are represented.
    expect(new Set(fromCsv.representatives.map((r) => r.label)).size).toBe(3);
    expect(Object.keys(fromCsv.coverage.labels ?? {}).sort()).toEqual(['east', 'north', 'south']);
  });

  it('reads JSON Lines and an image archive', async () => {
    const jsonl = join(dir, 'points.jsonl');
    writeFileSync(jsonl, ids.map((id, i) => JSON.stringify({ id, vector: Array.from(matrix.subarray(i * cols, i * cols + cols)) })).join('\n'));
    const fromJsonl = await runCli([jsonl, '--k', '4', '--weights', 'uniform']);
    expect(fromJsonl.representatives.every((r) => r.weight === 0.25)).toBe(true);

    const red = await png(8, 8, [220, 20, 20]);
    const blue = await png(8, 8, [20, 20, 220]);
    const specs = Array.from({ length: 12 }, (_, i) => ({ name: `${i % 2 ? 'red' : 'blue'}/img-${i}.png`, data: i % 2 ? red : blue }));
    const tar = join(dir, 'images.tar.gz');
    writeFileSync(tar, await buildTar(specs, true));
    const fromImages = await runCli([tar, '--k', '2', '--image-size', '4', '--image-color', 'rgb']);
    expect(fromImages.dims).toBe(48);
    expect(new Set(fromImages.representatives.map((r) => r.label))).toEqual(new Set(['red', 'blue']));
  });

  it('fails with a catalogued code and leaves no temporary store behind', async () => {
    const file = join(dir, 'tiny.npy');
    writeFileSync(file, npyBytes(matrix.subarray(0, 3 * cols), [3, cols]));
    await expect(runCli([file, '--k', '5'])).rejects.toMatchObject({ code: 'K_TOO_LARGE' });
    const bad = join(dir, 'bad.npy');
    writeFileSync(bad, Buffer.from('not a numpy file at all'));
    await expect(runCli([bad, '--k', '2', '--format', 'npy'])).rejects.toMatchObject({ code: 'NPY_BAD_MAGIC' });
    expect(leftovers()).toEqual(before);
  });

  describe('a float32 .npy read in place', () => {
    /** runSelectCommand with the options of runCli; the result file's text, trace.seconds (timings) left out. */
    async function resultText(file: string, extra: Partial<SelectCommandInput> = {}): Promise<string> {
      const out = join(dir, `result-${Math.random().toString(36).slice(2)}.json`);
      await runSelectCommand({ file, read: {}, options: { k: 6, seed: 3, maxIterations: 150 }, backend: 'onnx', progress: false, out, ...extra });
      const doc = JSON.parse(readFileSync(out, 'utf8')) as CliResult;
      expect(Object.keys(doc.trace.seconds).length).toBeGreaterThan(0);
      doc.trace.seconds = {};
      return JSON.stringify(doc, null, 2);
    }

    /** Runs `run` with the system temp directory pointing nowhere: any temporary store fails with ENOENT. */
    async function withoutTmpdir<T>(run: () => Promise<T>): Promise<T> {
      const saved = process.env.TMPDIR;
      process.env.TMPDIR = join(dir, 'no-such-dir');
      try {
        return await run();
      } finally {
        if (saved === undefined) delete process.env.TMPDIR;
        else process.env.TMPDIR = saved;
      }
    }

    const file = join(dir, 'in-place.npy');
    writeFileSync(file, npyBytes(matrix, [rows, cols]));

    it('writes the result the ingested copy gives, held in memory and read from the file, without a temporary store', async () => {
      for (const memoryBudgetBytes of [undefined, 1]) {
        const inPlace = await withoutTmpdir(() => resultText(file, { memoryBudgetBytes }));
        await expect(withoutTmpdir(() => resultText(file, { memoryBudgetBytes, readNpyInPlace: false }))).rejects.toMatchObject({ code: 'ENOENT' });
        const ingested = await resultText(file, { memoryBudgetBytes, readNpyInPlace: false });
        expect(inPlace).toBe(ingested);
        const doc = JSON.parse(inPlace) as CliResult;
        expect(doc.dataset).toEqual({
          source: 'in-place.npy',
          format: 'npy',
          rows,
          cols,
          sha256: createHash('sha256').update(readFileSync(file)).digest('hex'),
          droppedNonFinite: 0,
          skippedImages: 0,
        });
        expect(doc.representatives.every((r) => r.id === String(r.index) && r.label === null)).toBe(true);
      }
    });

    it('gives the same selection as a float64 copy of the same values, which is ingested', async () => {
      const f64 = join(dir, 'same-f64.npy');
      writeFileSync(f64, npyBytes(Float64Array.from(matrix), [rows, cols]));
      await expect(withoutTmpdir(() => resultText(f64))).rejects.toMatchObject({ code: 'ENOENT' });
      const a = JSON.parse(await resultText(file)) as CliResult;
      const b = JSON.parse(await resultText(f64)) as CliResult;
      expect(b.dataset.sha256).not.toBe(a.dataset.sha256);
      expect({ ...b, dataset: { ...b.dataset, source: '', sha256: '' } }).toEqual({ ...a, dataset: { ...a.dataset, source: '', sha256: '' } });
    });

    it('rejects NaN with the error code and row that ingestion gives; --non-finite drop falls back to ingestion', async () => {
      const withNaN = Float32Array.from(matrix);
      withNaN[17 * cols + 2] = NaN;
      const nanFile = join(dir, 'nan.npy');
      writeFileSync(nanFile, npyBytes(withNaN, [rows, cols]));
      const expected = { code: 'NON_FINITE_VALUE', message: 'Row 17 has a NaN or infinite value in feature 2.', details: { row: 17, feature: 2 } };
      await expect(runCli([nanFile, '--k', '6'])).rejects.toMatchObject(expected);
      await expect(runCli([nanFile, '--k', '6', '--memory-budget', '0'])).rejects.toMatchObject(expected);
      await expect(resultText(nanFile, { readNpyInPlace: false })).rejects.toMatchObject(expected);
      const dropped = await runCli([nanFile, '--k', '6', '--seed', '3', '--non-finite', 'drop']);
      expect(dropped.dataset).toMatchObject({ rows: rows - 1, droppedNonFinite: 1 });
      // Ids stay source row numbers: rows after the dropped one are one further on.
      for (const rep of dropped.representatives) expect(rep.id).toBe(String(rep.index < 17 ? rep.index : rep.index + 1));
      expect(leftovers()).toEqual(before);
    });
  });
});

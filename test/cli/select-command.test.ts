import { mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { buildProgram } from '../../src/cli/program.js';
import type { CliResult } from '../../src/cli/select-command.js';
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
});

import { mkdtemp, readdir, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { expect } from 'vitest';
import { ingestFile } from '../../src/data/dataset-store.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../../src/data/read-options.js';
import type { DatasetFormat } from '../../src/data/reader.js';
import { ERROR_CATALOGUE } from '../../src/errors.js';

/** A scratch folder for input files, with a `store/` folder inside; remove it with cleanup(). */
export async function scratch(prefix = 'cairn-data-', parent = tmpdir()): Promise<{
  root: string;
  storeDir: string;
  input(name: string, content: string | Buffer): Promise<string>;
  cleanup(): Promise<void>;
}> {
  const root = await mkdtemp(join(parent, prefix));
  const storeDir = join(root, 'store');
  let n = 0;
  return {
    root,
    storeDir,
    async input(name, content) {
      const path = join(root, `${n++}-${name}`);
      await writeFile(path, content);
      return path;
    },
    cleanup: () => rm(root, { recursive: true, force: true }),
  };
}

let counter = 0;
export function nextId(): string {
  return `ds-${process.pid}-${counter++}`;
}

/** Ingests `path` and expects a CairnError matching `expected`; then checks the store is as it was before. */
export async function expectIngestFailure(
  path: string,
  storeDir: string,
  expected: { code: keyof typeof ERROR_CATALOGUE; details?: Record<string, unknown> },
  overrides: ReadOptionOverrides = {},
  format?: DatasetFormat,
): Promise<void> {
  const before = await listStore(storeDir);
  const promise = ingestFile(path, { storeDir, datasetId: nextId(), format, options: defaultReadOptions(overrides) });
  await expect(promise).rejects.toMatchObject(expected);
  expect(await listStore(storeDir)).toEqual(before);
}

/** The store folder's entries, sorted; [] when it does not exist yet. */
export async function listStore(storeDir: string): Promise<string[]> {
  return (await readdir(storeDir).catch(() => [] as string[])).sort();
}

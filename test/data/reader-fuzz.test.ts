import { existsSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { deleteDataset, ingestFile } from '../../src/data/dataset-store.js';
import { defaultReadOptions } from '../../src/data/read-options.js';
import type { DatasetFormat } from '../../src/data/reader.js';
import { CairnError, ERROR_CATALOGUE } from '../../src/errors.js';
import { delimitedText, jsonlText, makeDataset, npyBytes, parquetBytes } from './fixtures.js';
import { listStore, scratch } from './store-helpers.js';

/**
 * Truncated, mutated and random bytes fed to every vector reader through ingestFile: 2,000 cases
 * per reader, 10,000 per run. Each case must either succeed or fail with a catalogued CairnError —
 * never another exception, never a hang — and must leave the store as it was (a success is deleted
 * again). Inputs are small and written to tmpfs when there is one. A failing run prints
 * fast-check's seed and path to replay.
 */
const RUNS_PER_READER = 2_000;

/** Far above a small file's ingestion time (a few ms); only a hang or a blow-up reaches it. */
const CASE_TIMEOUT_MS = 10_000;

const ds = makeDataset(6, 3, 11);
const SEEDS: Record<Exclude<DatasetFormat, 'zip' | 'tar'>, Buffer> = {
  npy: npyBytes(ds.matrix, [6, 3]),
  csv: Buffer.from(delimitedText(ds, ',')),
  tsv: Buffer.from(delimitedText(ds, '\t')),
  jsonl: Buffer.from(jsonlText(ds)),
  parquet: parquetBytes(ds, { rowGroupSize: 4, codec: 'UNCOMPRESSED' }),
};
const SNAPPY_PARQUET = parquetBytes(ds, { rowGroupSize: 4 });

/** Bytes that matter to the text formats, so mutations hit the parsers' interesting paths. */
const TOKENS = [',', '\t', '"', '\n', '\r', '{', '}', '[', ']', ':', 'NaN', '-', 'e', '1e39', 'null', '\\', '\uFEFF', ' '].map((t) => Buffer.from(t));

type Edit = { kind: 'set'; at: number; byte: number } | { kind: 'insert'; at: number; bytes: Buffer } | { kind: 'delete'; at: number; length: number };

const edit: fc.Arbitrary<Edit> = fc.oneof(
  fc.record({ kind: fc.constant('set' as const), at: fc.nat(), byte: fc.integer({ min: 0, max: 255 }) }),
  fc.record({
    kind: fc.constant('insert' as const),
    at: fc.nat(),
    bytes: fc.oneof(fc.constantFrom(...TOKENS), fc.uint8Array({ minLength: 1, maxLength: 8 }).map((a) => Buffer.from(a))),
  }),
  fc.record({ kind: fc.constant('delete' as const), at: fc.nat(), length: fc.integer({ min: 1, max: 16 }) }),
);

function applyEdits(seed: Buffer, edits: Edit[]): Buffer {
  let bytes = Buffer.from(seed);
  for (const e of edits) {
    const at = bytes.length === 0 ? 0 : e.at % (bytes.length + 1);
    if (e.kind === 'set' && at < bytes.length) bytes[at] = e.byte;
    else if (e.kind === 'insert') bytes = Buffer.concat([bytes.subarray(0, at), e.bytes, bytes.subarray(at)]);
    else if (e.kind === 'delete') bytes = Buffer.concat([bytes.subarray(0, at), bytes.subarray(at + e.length)]);
  }
  return bytes;
}

/** Inputs: a truncated seed, an edited seed, the seed's first bytes followed by noise, or pure noise. */
function inputs(seeds: Buffer[]): fc.Arbitrary<Buffer> {
  const seed = fc.constantFrom(...seeds);
  return fc.oneof(
    { weight: 2, arbitrary: fc.tuple(seed, fc.nat()).map(([s, n]) => s.subarray(0, n % (s.length + 1))) },
    { weight: 5, arbitrary: fc.tuple(seed, fc.array(edit, { minLength: 1, maxLength: 6 })).map(([s, edits]) => applyEdits(s, edits)) },
    {
      weight: 2,
      arbitrary: fc
        .tuple(seed, fc.nat(), fc.uint8Array({ maxLength: 256 }))
        .map(([s, n, noise]) => Buffer.concat([s.subarray(0, n % (s.length + 1)), noise])),
    },
    { weight: 1, arbitrary: fc.uint8Array({ maxLength: 512 }).map((a) => Buffer.from(a)) },
  );
}

const CODES = new Set(Object.keys(ERROR_CATALOGUE));


/** Registers one test: RUNS_PER_READER damaged inputs for `format`. */
function fuzzReader(format: keyof typeof SEEDS): void {
  describe(`${format} reader fuzz`, () => {
    let dir: Awaited<ReturnType<typeof scratch>>;
    beforeAll(async () => {
      // tmpfs when there is one: thousands of tiny ingestions are mostly file-system metadata work.
      dir = await scratch('cairn-fuzz-', existsSync('/dev/shm') ? '/dev/shm' : undefined);
    });
    afterAll(async () => {
      await dir.cleanup();
    });

    it(`${RUNS_PER_READER} damaged inputs succeed or fail with a catalogued code`, async () => {
      const seed = SEEDS[format];
      const path = join(dir.root, `fuzz-input.${format}`);
      const storeDir = join(dir.root, 'store');
      const seeds = format === 'parquet' ? [seed, SNAPPY_PARQUET] : [seed];
      let n = 0;
      let succeeded = 0;
      await fc.assert(
        fc.asyncProperty(inputs(seeds), fc.constantFrom<'fail' | 'drop'>('fail', 'drop'), async (bytes, nonFinite) => {
          await writeFile(path, bytes);
          const datasetId = `case-${n++}`;
          const options = defaultReadOptions({ nonFinite, limits: { maxRows: 1000, maxCols: 4096 } });
          const request = { storeDir, datasetId, format, options, durable: false };
          const outcome = await withTimeout(ingestFile(path, request), CASE_TIMEOUT_MS).then(
            () => 'ok' as const,
            (err: unknown) => err,
          );
          if (outcome === 'ok') {
            succeeded++;
            await deleteDataset(storeDir, datasetId);
          } else {
            expect(outcome).toBeInstanceOf(CairnError);
            expect(CODES.has((outcome as CairnError).code)).toBe(true);
          }
          expect(await listStore(storeDir)).toEqual([]);
        }),
        { numRuns: RUNS_PER_READER, endOnFailure: true },
      );
      // The seeds themselves and harmless edits must read: the fuzz is not just failing at the door.
      expect(succeeded).toBeGreaterThan(0);
    });
  });
}

for (const format of ['npy', 'csv', 'tsv', 'jsonl', 'parquet'] as const) fuzzReader(format);

function withTimeout<T>(promise: Promise<T>, ms: number): Promise<T> {
  let timer: NodeJS.Timeout | undefined;
  const timeout = new Promise<never>((_, reject) => {
    timer = setTimeout(() => reject(new Error(`no answer within ${ms} ms`)), ms);
  });
  return Promise.race([promise, timeout]).finally(() => clearTimeout(timer));
}

import { rmSync } from 'node:fs';
import { gzipSync } from 'node:zlib';
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { CairnError, ERROR_CATALOGUE } from '../../src/errors.js';
import { tarReader } from '../../src/data/tar-reader.js';
import { zipReader } from '../../src/data/zip-reader.js';
import type { DatasetReader } from '../../src/data/reader.js';
import { buildTar, buildZip, jpeg, MemorySink, png, readOptions, tempDir, ThumbnailSink } from './archive-fixtures.js';

/**
 * Truncated, mutated and random bytes fed to both archive readers must end in a summary or a
 * CairnError with a catalogued code: never another error, a hang, or an unhandled rejection.
 */
const RUNS_PER_READER = 2_000;
const CASE_TIMEOUT_MS = 5_000;

const tmp = tempDir();
afterAll(() => tmp.cleanup());

const seeds: Record<'zip' | 'tar', Buffer> = { zip: Buffer.alloc(0), tar: Buffer.alloc(0) };
beforeAll(async () => {
  const a = await png(8, 8, [200, 10, 10]);
  const b = await jpeg(8, 8, [10, 200, 10]);
  const manifest = Buffer.from('path,label\ngear/a.png,g\n');
  seeds.zip = buildZip([
    { name: 'gear/', mode: 0o040755 },
    { name: 'gear/a.png', data: a },
    { name: 'bolt/b.jpg', data: b, method: 'store' },
    { name: 'labels.csv', data: manifest },
  ]);
  seeds.tar = await buildTar([
    { name: 'gear/', type: 'directory' },
    { name: 'gear/a.png', data: a },
    { name: 'bolt/b.jpg', data: b },
    { name: 'labels.csv', data: manifest },
  ]);
});

type Mutation =
  | { kind: 'truncate'; at: number }
  | { kind: 'overwrite'; edits: { at: number; value: number }[] }
  | { kind: 'splice'; at: number; bytes: Uint8Array }
  | { kind: 'random'; bytes: Uint8Array };

const mutation: fc.Arbitrary<Mutation> = fc.oneof(
  fc.record({ kind: fc.constant('truncate' as const), at: fc.nat() }),
  fc.record({
    kind: fc.constant('overwrite' as const),
    edits: fc.array(fc.record({ at: fc.nat(), value: fc.integer({ min: 0, max: 255 }) }), { minLength: 1, maxLength: 8 }),
  }),
  fc.record({ kind: fc.constant('splice' as const), at: fc.nat(), bytes: fc.uint8Array({ minLength: 1, maxLength: 64 }) }),
  fc.record({ kind: fc.constant('random' as const), bytes: fc.uint8Array({ maxLength: 4096 }) }),
);

function mutate(seed: Buffer, m: Mutation): Buffer {
  switch (m.kind) {
    case 'truncate':
      return seed.subarray(0, m.at % (seed.length + 1));
    case 'overwrite': {
      const out = Buffer.from(seed);
      for (const { at, value } of m.edits) out[at % out.length] = value;
      return out;
    }
    case 'splice': {
      const at = m.at % (seed.length + 1);
      return Buffer.concat([seed.subarray(0, at), m.bytes, seed.subarray(at)]);
    }
    case 'random':
      return Buffer.from(m.bytes);
  }
}

/** Rewrites the checksum of every 512-byte block that is a header in the seed, so mutated fields get parsed. */
function fixTarChecksums(bytes: Buffer): Buffer {
  const out = Buffer.from(bytes);
  for (let at = 0; at + 512 <= Math.min(out.length, seeds.tar.length); at += 512) {
    const seedBlock = seeds.tar.subarray(at, at + 512);
    if (seedBlock.toString('latin1', 257, 262) !== 'ustar') continue;
    out.fill(0x20, at + 148, at + 156);
    let sum = 0;
    for (let i = at; i < at + 512; i++) sum += out[i];
    out.write(sum.toString(8).padStart(6, '0') + '\0 ', at + 148, 'latin1');
  }
  return out;
}

/** FC_SEED and FC_PATH (printed by fast-check on a failure) replay a failing case. */
const replay = process.env.FC_SEED ? { seed: Number(process.env.FC_SEED), path: process.env.FC_PATH } : {};

let caseNumber = 0;
async function runCase(reader: DatasetReader, bytes: Buffer, onBadImage: 'skip' | 'fail', thumbnails: boolean): Promise<void> {
  const path = tmp.write(`case-${caseNumber++}`, bytes);
  const sink = thumbnails ? new ThumbnailSink() : new MemorySink();
  const options = readOptions({
    limits: { maxEntries: 64, maxUncompressedBytes: 2 << 20, maxEntryBytes: 512 << 10, maxImagePixels: 1 << 20 },
    image: { size: 4, onBadImage, thumbnailSize: 4 },
  });
  try {
    const summary = await reader.read(path, sink, options);
    expect(summary.rows).toBeGreaterThan(0);
    expect(sink.ids.length).toBe(summary.rows);
  } catch (err) {
    if (!(err instanceof CairnError) || !(err.code in ERROR_CATALOGUE)) throw err;
  } finally {
    rmSync(path, { force: true });
  }
}

describe('archive readers on hostile bytes', () => {
  const policy = fc.constantFrom<'skip' | 'fail'>('skip', 'fail');

  it(`zip: ${RUNS_PER_READER} truncated / mutated / random inputs`, async () => {
    await fc.assert(
      fc.asyncProperty(mutation, policy, fc.boolean(), (m, onBadImage, thumbs) => runCase(zipReader, mutate(seeds.zip, m), onBadImage, thumbs)),
      { numRuns: RUNS_PER_READER, plugins: [fc.timeout(CASE_TIMEOUT_MS)], ...replay },
    );
  });

  it(`tar: ${RUNS_PER_READER} truncated / mutated / random inputs, plain and gzipped`, async () => {
    // 'inner' mutates the tar and then gzips it, so gzip's checksum does not hide tar-level damage.
    // 'resum' fixes header checksums after mutating, so damage reaches names, types and sizes.
    const wrapping = fc.constantFrom<'plain' | 'outer' | 'inner' | 'resum'>('plain', 'outer', 'inner', 'resum');
    await fc.assert(
      fc.asyncProperty(mutation, wrapping, policy, fc.boolean(), (m, wrap, onBadImage, thumbs) => {
        const bytes =
          wrap === 'plain'
            ? mutate(seeds.tar, m)
            : wrap === 'outer'
              ? mutate(gzipSync(seeds.tar), m)
              : wrap === 'inner'
                ? gzipSync(mutate(seeds.tar, m))
                : fixTarChecksums(mutate(seeds.tar, m));
        return runCase(tarReader, bytes, onBadImage, thumbs);
      }),
      { numRuns: RUNS_PER_READER, plugins: [fc.timeout(CASE_TIMEOUT_MS)], ...replay },
    );
  });
});

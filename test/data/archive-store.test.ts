import { readdir } from 'node:fs/promises';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ingestFile } from '../../src/data/dataset-store.js';
import { defaultReadOptions } from '../../src/data/read-options.js';
import { buildTar, buildZip, png, pngHeaderOnly } from './archive-fixtures.js';
import { expectIngestFailure, nextId, scratch } from './store-helpers.js';

/** The archive readers through the dataset store: good archives land whole, bad ones leave nothing. */
let dir: Awaited<ReturnType<typeof scratch>>;
let red: Buffer;
beforeAll(async () => {
  dir = await scratch('cairn-archive-store-');
  red = await png(12, 12, [255, 0, 0]);
});
afterAll(async () => {
  await dir.cleanup();
});

const image = { size: 4, color: 'gray', thumbnailSize: 8, onBadImage: 'fail' } as const;

describe('archive ingestion into the store', () => {
  it('stores a zip and a tar.gz of images with labels and thumbnails', async () => {
    const entries = [
      { name: 'gear/a.png', data: red },
      { name: 'bolt/b.png', data: red },
    ];
    for (const [name, bytes] of [
      ['parts.zip', buildZip(entries)],
      ['parts.tar.gz', await buildTar(entries, true)],
    ] as const) {
      const path = await dir.input(name, bytes);
      const datasetId = nextId();
      const meta = await ingestFile(path, { storeDir: dir.storeDir, datasetId, options: defaultReadOptions({ image }) });
      expect(meta).toMatchObject({ rows: 2, cols: 16, hasLabels: true, skippedImages: 0 });
      expect((await readdir(join(dir.storeDir, datasetId, 'thumbs'))).sort()).toEqual(['0.png', '1.png']);
    }
  });

  it('leaves nothing behind when an archive fails, also after the dataset files were opened', async () => {
    const zeros = Buffer.alloc(4 << 20);
    const cases = [
      { bytes: buildZip([{ name: 'a.png', data: red }, { name: 'z.bin', data: zeros }]), code: 'ARCHIVE_TOO_LARGE' as const, limits: { maxUncompressedBytes: 1 << 20 } },
      { bytes: await buildTar([{ name: 'a.png', data: red }, { name: '../evil.png', data: red }]), code: 'ARCHIVE_UNSAFE_PATH' as const },
      { bytes: await buildTar([{ name: 'a.png', data: red }, { name: 'l.png', type: 'symlink', linkname: '/etc/passwd' }], true), code: 'ARCHIVE_UNSAFE_ENTRY' as const },
      // These fail in the decoding pass, after the first image has opened the dataset's files.
      { bytes: buildZip([{ name: 'a.png', data: red }, { name: 'huge.png', data: pngHeaderOnly(50_000, 50_000) }]), code: 'IMAGE_TOO_MANY_PIXELS' as const },
      { bytes: await buildTar([{ name: 'a.png', data: red }, { name: 'bad.png', data: Buffer.from('nope') }], true), code: 'IMAGE_UNDECODABLE' as const },
      { bytes: buildZip([{ name: 'a.png', data: red }, { name: 'b.png', data: red }]), code: 'DATASET_TOO_MANY_ROWS' as const, limits: { maxRows: 1 } },
    ];
    for (const c of cases) {
      const path = await dir.input('bad.archive', c.bytes);
      await expectIngestFailure(path, dir.storeDir, { code: c.code }, { image, limits: c.limits });
    }
  });
});

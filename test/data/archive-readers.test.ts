import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import sharp from 'sharp';
import { CairnError, type ErrorCode } from '../../src/errors.js';
import { tarReader } from '../../src/data/tar-reader.js';
import { zipReader } from '../../src/data/zip-reader.js';
import type { DatasetReader, ReadOptions } from '../../src/data/reader.js';
import {
  buildTar,
  buildZip,
  jpeg,
  MemorySink,
  png,
  pngHeaderOnly,
  readOptions,
  tempDir,
  ThumbnailSink,
  type TarSpec,
  type ZipSpec,
} from './archive-fixtures.js';

const tmp = tempDir();
afterAll(() => tmp.cleanup());

let red: Buffer;
let blue: Buffer;
let greenJpeg: Buffer;
let wide: Buffer;
beforeAll(async () => {
  red = await png(12, 12, [255, 0, 0]);
  blue = await png(20, 10, [0, 0, 255]);
  greenJpeg = await jpeg(16, 16, [0, 255, 0]);
  wide = await png(40, 10, [255, 255, 255]);
});

type Spec = { name: string; data?: Buffer };
type Kind = 'zip' | 'tar' | 'tgz';
const KINDS: Kind[] = ['zip', 'tar', 'tgz'];
let counter = 0;

/** Writes the entries as an archive of the given kind and returns its path and reader. */
async function archive(kind: Kind, specs: Spec[]): Promise<{ path: string; reader: DatasetReader }> {
  const bytes = kind === 'zip' ? buildZip(specs as ZipSpec[]) : await buildTar(specs as TarSpec[], kind === 'tgz');
  return { path: tmp.write(`a${counter++}.${kind}`, bytes), reader: kind === 'zip' ? zipReader : tarReader };
}

async function expectCode(run: Promise<unknown>, code: ErrorCode): Promise<CairnError> {
  const err = await run.then(
    () => null,
    (e: unknown) => e,
  );
  expect(err).toBeInstanceOf(CairnError);
  expect((err as CairnError).code).toBe(code);
  return err as CairnError;
}

async function read(kind: Kind, specs: Spec[], options: ReadOptions = readOptions(), sink = new MemorySink()) {
  const { path, reader } = await archive(kind, specs);
  const summary = await reader.read(path, sink, options);
  return { summary, sink };
}

describe.each(KINDS)('%s archives', (kind) => {
  it('labels images by folder, keeps archive order and ignores other files', async () => {
    const { summary, sink } = await read(kind, [
      { name: 'gear/' },
      { name: 'gear/a.png', data: red },
      { name: 'readme.txt', data: Buffer.from('not an image') },
      { name: './bolt\\b.jpg', data: greenJpeg },
      { name: 'bolt/raw-bytes.bin', data: blue },
      { name: 'loose.png', data: red },
    ]);
    expect(summary).toEqual({ rows: 4, cols: 64, droppedNonFinite: 0, skippedImages: 0, hasLabels: true });
    expect(sink.ids).toEqual(['gear/a.png', 'bolt/b.jpg', 'bolt/raw-bytes.bin', 'loose.png']);
    expect(sink.labels).toEqual(['gear', 'bolt', 'bolt', null]);
    expect(sink.cols).toBe(64);
  });

  it('takes labels from labels.csv over folder names, wherever it sits in the archive', async () => {
    const manifest = Buffer.from('path,label,note\ngear/a.png,sprocket,x\n"./gear/c.png",,\nmissing.png,ghost,\n');
    const { summary, sink } = await read(kind, [
      { name: 'gear/a.png', data: red },
      { name: 'gear/b.png', data: red },
      { name: 'gear/c.png', data: red },
      { name: 'labels.csv', data: manifest },
    ]);
    expect(summary.rows).toBe(3);
    expect(summary.hasLabels).toBe(true);
    expect(sink.labels).toEqual(['sprocket', null, null]);
  });

  it('reports no labels when images sit at the root without a manifest', async () => {
    const { summary, sink } = await read(kind, [{ name: 'a.png', data: red }]);
    expect(summary.hasLabels).toBe(false);
    expect(sink.labels).toEqual([null]);
  });

  it('gives size² gray features and 3·size² rgb features in HWC order, scaled to 0..1', async () => {
    const gray = await read(kind, [{ name: 'r.png', data: red }], readOptions({ image: { size: 6, color: 'gray' } }));
    expect(gray.summary.cols).toBe(36);
    expect(gray.sink.rows[0].length).toBe(36);
    const rgb = await read(kind, [{ name: 'r.png', data: red }], readOptions({ image: { size: 6, color: 'rgb' } }));
    expect(rgb.summary.cols).toBe(108);
    expect(Array.from(rgb.sink.rows[0].subarray(0, 6))).toEqual([1, 0, 0, 1, 0, 0]);
    for (const v of gray.sink.rows[0]) expect(v).toBeGreaterThan(0.1);
  });

  it('fits non-square images as asked: contain pads with black, cover crops', async () => {
    const contain = await read(kind, [{ name: 'w.png', data: wide }], readOptions({ image: { size: 8, fit: 'contain' } }));
    const cover = await read(kind, [{ name: 'w.png', data: wide }], readOptions({ image: { size: 8, fit: 'cover' } }));
    expect(contain.sink.rows[0][0]).toBe(0);
    expect(cover.sink.rows[0][0]).toBe(1);
  });

  it('writes a PNG thumbnail per row when the sink takes them', async () => {
    const sink = new ThumbnailSink();
    await read(kind, [{ name: 'a.png', data: red }, { name: 'b.jpg', data: greenJpeg }], readOptions({ image: { thumbnailSize: 10 } }), sink);
    expect([...sink.thumbnails.keys()]).toEqual([0, 1]);
    const meta = await sharp(sink.thumbnails.get(1)).metadata();
    expect([meta.format, meta.width, meta.height]).toEqual(['png', 10, 10]);
    // With thumbnails, features come from the decoded thumbnail: they must match a direct decode.
    const direct = await read(kind, [{ name: 'a.png', data: red }, { name: 'b.jpg', data: greenJpeg }], readOptions({ image: { thumbnailSize: 10 } }));
    sink.rows.forEach((row, r) => row.forEach((v, i) => expect(Math.abs(v - direct.sink.rows[r][i])).toBeLessThan(0.02)));
  });

  it('rejects ../ paths, absolute paths and drive letters', async () => {
    for (const name of ['../evil.png', 'a/../../evil.png', '..\\evil.png', 'C:/evil.png']) {
      await expectCode(read(kind, [{ name: 'ok.png', data: red }, { name, data: red }]), 'ARCHIVE_UNSAFE_PATH');
    }
  });

  it('refuses a PNG whose header declares 50,000 × 50,000 pixels before decoding it', async () => {
    const huge = pngHeaderOnly(50_000, 50_000);
    // With 'skip', an attempt to decode would have been counted and skipped instead.
    const err = await expectCode(read(kind, [{ name: 'huge.png', data: huge }], readOptions({ image: { onBadImage: 'skip' } })), 'IMAGE_TOO_MANY_PIXELS');
    expect(err.details).toMatchObject({ entry: 'huge.png', width: 50_000, height: 50_000 });
  });

  it('enforces maxEntries, counting folders and other files', async () => {
    const specs = [{ name: 'd/' }, { name: 'd/a.png', data: red }, { name: 'x.txt', data: Buffer.from('x') }];
    await expectCode(read(kind, specs, readOptions({ limits: { maxEntries: 2 } })), 'ARCHIVE_TOO_MANY_ENTRIES');
    expect((await read(kind, specs, readOptions({ limits: { maxEntries: 3 } }))).summary.rows).toBe(1);
  });

  it('enforces maxEntryBytes, and the shared maxRows, maxCols and maxFileBytes limits', async () => {
    const specs = [{ name: 'a.png', data: red }, { name: 'big.bin', data: Buffer.alloc(5000) }];
    await expectCode(read(kind, specs, readOptions({ limits: { maxEntryBytes: 4000 } })), 'ARCHIVE_ENTRY_TOO_LARGE');
    const two = [{ name: 'a.png', data: red }, { name: 'b.png', data: red }];
    await expectCode(read(kind, two, readOptions({ limits: { maxRows: 1 } })), 'DATASET_TOO_MANY_ROWS');
    await expectCode(read(kind, two, readOptions({ limits: { maxCols: 100 }, image: { size: 8, color: 'rgb' } })), 'DATASET_TOO_MANY_COLUMNS');
    await expectCode(read(kind, two, readOptions({ limits: { maxFileBytes: 100 } })), 'DATASET_TOO_LARGE');
  });

  it('skips and counts undecodable images, or fails naming the entry', async () => {
    const truncated = red.subarray(0, red.length - 30);
    const specs = [{ name: 'a.png', data: red }, { name: 'bad.png', data: Buffer.from('garbage bytes here') }, { name: 'cut.png', data: truncated }];
    const { summary, sink } = await read(kind, specs, readOptions({ image: { onBadImage: 'skip' } }));
    expect(summary.skippedImages).toBe(2);
    expect(sink.ids).toEqual(['a.png']);
    const err = await expectCode(read(kind, specs, readOptions({ image: { onBadImage: 'fail' } })), 'IMAGE_UNDECODABLE');
    expect(err.details.entry).toBe('bad.png');
  });

  it('fails with DATASET_EMPTY when there are no images, or none decodable', async () => {
    await expectCode(read(kind, [{ name: 'a.txt', data: Buffer.from('hello') }, { name: 'd/' }]), 'DATASET_EMPTY');
    await expectCode(read(kind, [{ name: 'bad.jpg', data: Buffer.from('nope') }], readOptions({ image: { onBadImage: 'skip' } })), 'DATASET_EMPTY');
  });

  it('rejects a manifest without path/label columns, with an unsafe path, or given twice', async () => {
    const manifest = (text: string) => ({ name: 'labels.csv', data: Buffer.from(text) });
    for (const specs of [
      [manifest('file,class\na.png,x\n')],
      [manifest('path,label\n../a.png,x\n')],
      [manifest('path,label\n'), { name: './labels.csv', data: Buffer.from('path,label\n') }],
    ]) {
      await expectCode(read(kind, [{ name: 'a.png', data: red }, ...specs]), 'ARCHIVE_BAD_MANIFEST');
    }
  });

  it('stops when the signal is aborted', async () => {
    const controller = new AbortController();
    controller.abort();
    await expectCode(read(kind, [{ name: 'a.png', data: red }], { ...readOptions(), signal: controller.signal }), 'DATASET_INGEST_CANCELLED');
  });

  it('fails with ARCHIVE_CORRUPT on truncated archives and on random bytes', async () => {
    const { path, reader } = await archive(kind, [{ name: 'a.png', data: red }, { name: 'b.png', data: blue }]);
    const { readFileSync } = await import('node:fs');
    const whole = readFileSync(path);
    const cut = tmp.write(`cut${counter++}`, whole.subarray(0, Math.floor(whole.length * 0.6)));
    await expectCode(reader.read(cut, new MemorySink(), readOptions()), 'ARCHIVE_CORRUPT');
    const noise = Buffer.alloc(3000);
    for (let i = 0; i < noise.length; i++) noise[i] = (i * 7919 + 13) % 251;
    await expectCode(reader.read(tmp.write(`noise${counter++}`, noise), new MemorySink(), readOptions()), 'ARCHIVE_CORRUPT');
  });
});

describe('zip specifics', () => {
  it('stops a zip bomb: entries that expand past maxUncompressedBytes', async () => {
    const zeros = Buffer.alloc(4 << 20);
    const bytes = buildZip([{ name: 'a.png', data: red }, { name: 'z1.png', data: zeros }, { name: 'z2.bin', data: zeros }]);
    expect(bytes.length).toBeLessThan(20_000);
    const options = readOptions({ limits: { maxUncompressedBytes: 1 << 20, maxEntryBytes: 16 << 20 } });
    await expectCode(zipReader.read(tmp.write('bomb.zip', bytes), new MemorySink(), options), 'ARCHIVE_TOO_LARGE');
  });

  it('stops a bomb whose central directory understates the size, as soon as it overflows', async () => {
    const bytes = buildZip([{ name: 'liar.png', data: Buffer.alloc(4 << 20), declaredSize: 100 }]);
    await expectCode(zipReader.read(tmp.write('liar.zip', bytes), new MemorySink(), readOptions()), 'ARCHIVE_CORRUPT');
  });

  it('refuses symlink and device entries by their Unix mode', async () => {
    const link = buildZip([{ name: 'a.png', data: red }, { name: 'link.png', data: Buffer.from('/etc/passwd'), mode: 0o120777 }]);
    await expectCode(zipReader.read(tmp.write('link.zip', link), new MemorySink(), readOptions()), 'ARCHIVE_UNSAFE_ENTRY');
    const fifo = buildZip([{ name: 'pipe', mode: 0o010644 }]);
    await expectCode(zipReader.read(tmp.write('fifo.zip', fifo), new MemorySink(), readOptions()), 'ARCHIVE_UNSAFE_ENTRY');
  });

  it('reads stored (uncompressed) entries and refuses absolute paths', async () => {
    const stored = buildZip([{ name: 'a.png', data: red, method: 'store' }]);
    expect((await zipReader.read(tmp.write('stored.zip', stored), new MemorySink(), readOptions())).rows).toBe(1);
    const absolute = buildZip([{ name: '/etc/a.png', data: red }]);
    await expectCode(zipReader.read(tmp.write('abs.zip', absolute), new MemorySink(), readOptions()), 'ARCHIVE_UNSAFE_PATH');
  });

  it('refuses encrypted entries and unknown compression methods', async () => {
    // General-purpose flag bit 0 marks an encrypted entry; method 12 is bzip2 (APPNOTE 4.4.4, 4.4.5).
    const patch = (bytes: Buffer, edit: (b: Buffer, central: number, local: number) => void): Buffer => {
      const b = Buffer.from(bytes);
      edit(b, b.indexOf(Buffer.from([0x50, 0x4b, 0x01, 0x02])), b.indexOf(Buffer.from([0x50, 0x4b, 0x03, 0x04])));
      return b;
    };
    const plain = buildZip([{ name: 'a.png', data: red, method: 'store' }]);
    // Deflated, since a stored encrypted entry must also carry the 12-byte encryption header.
    const encrypted = patch(buildZip([{ name: 'a.png', data: red }]), (b, c, l) => {
      b.writeUInt16LE(b.readUInt16LE(c + 8) | 1, c + 8);
      b.writeUInt16LE(b.readUInt16LE(l + 6) | 1, l + 6);
    });
    await expectCode(zipReader.read(tmp.write('enc.zip', encrypted), new MemorySink(), readOptions()), 'ARCHIVE_UNSUPPORTED_ENTRY');
    const bzip2 = patch(plain, (b, c, l) => {
      b.writeUInt16LE(12, c + 10);
      b.writeUInt16LE(12, l + 8);
    });
    await expectCode(zipReader.read(tmp.write('bz2.zip', bzip2), new MemorySink(), readOptions()), 'ARCHIVE_UNSUPPORTED_ENTRY');
  });
});

describe('tar specifics', () => {
  it('rejects a header size it cannot parse instead of waiting for data forever', async () => {
    // Found by the fuzz suite: a size field starting with 0x81 (base-256 form) parses to null in
    // tar-stream, whose extract then never ends. The header checksum is recomputed so it is read.
    const bytes = await buildTar([{ name: 'a.png', data: red }]);
    bytes[124] = 0x81;
    bytes.fill(0x20, 148, 156);
    let sum = 0;
    for (let i = 0; i < 512; i++) sum += bytes[i];
    bytes.write(sum.toString(8).padStart(6, '0') + '\0 ', 148, 'latin1');
    await expectCode(tarReader.read(tmp.write('size.tar', bytes), new MemorySink(), readOptions()), 'ARCHIVE_CORRUPT');
  });

  it('stops a gzip bomb as the bytes flow out of gunzip', async () => {
    const bytes = await buildTar([{ name: 'zeros.bin', data: Buffer.alloc(8 << 20) }], true);
    expect(bytes.length).toBeLessThan(40_000);
    const options = readOptions({ limits: { maxUncompressedBytes: 1 << 20, maxEntryBytes: 16 << 20 } });
    await expectCode(tarReader.read(tmp.write('bomb.tgz', bytes), new MemorySink(), options), 'ARCHIVE_TOO_LARGE');
  });

  it('counts every byte out of gunzip, headers included, not just declared entry sizes', async () => {
    const empties = Array.from({ length: 3000 }, (_, i) => ({ name: `e${i}.txt` }));
    const bytes = await buildTar([{ name: 'a.png', data: red }, ...empties], true);
    const options = readOptions({ limits: { maxUncompressedBytes: 1 << 20, maxEntries: 10_000 } });
    const err = await expectCode(tarReader.read(tmp.write('headers.tgz', bytes), new MemorySink(), options), 'ARCHIVE_TOO_LARGE');
    expect(err.details.limit).toBe('maxUncompressedBytes');
  });

  it('refuses symlinks, hard links, FIFOs and devices', async () => {
    const cases: TarSpec[] = [
      { name: 'link.png', type: 'symlink', linkname: '/etc/passwd' },
      { name: 'hard.png', type: 'link', linkname: 'a.png' },
      { name: 'pipe', type: 'fifo' },
      { name: 'dev', type: 'character-device' },
    ];
    for (const spec of cases) {
      const bytes = await buildTar([{ name: 'a.png', data: red }, spec]);
      await expectCode(tarReader.read(tmp.write(`t${counter++}.tar`, bytes), new MemorySink(), readOptions()), 'ARCHIVE_UNSAFE_ENTRY');
    }
  });

  it('refuses entry types it does not know (a GNU sparse file here)', async () => {
    const bytes = await buildTar([{ name: 'a.png', data: red }, { name: 'sparse.png', data: red }]);
    const at = bytes.indexOf('sparse.png'); // the name opens its 512-byte header
    bytes[at + 156] = 'S'.charCodeAt(0);
    bytes.fill(0x20, at + 148, at + 156);
    const sum = bytes.subarray(at, at + 512).reduce((s, b) => s + b, 0);
    bytes.write(sum.toString(8).padStart(6, '0') + '\0 ', at + 148, 'latin1');
    const err = await expectCode(tarReader.read(tmp.write('sparse.tar', bytes), new MemorySink(), readOptions()), 'ARCHIVE_UNSAFE_ENTRY');
    expect(err.details.reason).toBe('unknown-type entry');
  });

  it('refuses absolute paths and detects gzip by magic, not by name', async () => {
    const absolute = await buildTar([{ name: '/etc/a.png', data: red }]);
    await expectCode(tarReader.read(tmp.write('abs.tar', absolute), new MemorySink(), readOptions()), 'ARCHIVE_UNSAFE_PATH');
    const gz = await buildTar([{ name: 'a.png', data: red }], true);
    expect((await tarReader.read(tmp.write('named-plain.tar', gz), new MemorySink(), readOptions())).rows).toBe(1);
  });
});

import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { crc32, deflateRawSync, gzipSync } from 'node:zlib';
import sharp from 'sharp';
import tar from 'tar-stream';
import type { DatasetSink, ReadOptions } from '../../src/data/reader.js';

/** Test-only helpers for the archive readers: an in-memory sink, images and archive writers. */

export class MemorySink implements DatasetSink {
  cols = -1;
  begins = 0;
  rows: Float32Array[] = [];
  ids: string[] = [];
  labels: (string | null)[] = [];
  thumbnails = new Map<number, Buffer>();

  async begin(cols: number): Promise<void> {
    if (this.begins++ > 0) throw new Error('begin called twice');
    this.cols = cols;
  }

  async writeRows(data: Float32Array, count: number, ids: readonly string[], labels: readonly (string | null)[]): Promise<void> {
    if (this.begins !== 1) throw new Error('writeRows before begin');
    if (data.length !== count * this.cols || ids.length !== count || labels.length !== count) throw new Error('bad batch shape');
    for (let i = 0; i < count; i++) this.rows.push(data.slice(i * this.cols, (i + 1) * this.cols));
    this.ids.push(...ids);
    this.labels.push(...labels);
  }
}

/** A sink that also keeps thumbnails. */
export class ThumbnailSink extends MemorySink {
  async writeThumbnail(row: number, png: Buffer): Promise<void> {
    if (row < 0 || row >= this.ids.length) throw new Error(`thumbnail for unwritten row ${row}`);
    this.thumbnails.set(row, png);
  }
}

export function readOptions(overrides: { limits?: Partial<ReadOptions['limits']>; image?: Partial<ReadOptions['image']> } = {}): ReadOptions {
  return {
    limits: {
      maxFileBytes: 64 << 20,
      maxRows: 10_000,
      maxCols: 100_000,
      maxEntries: 1_000,
      maxUncompressedBytes: 64 << 20,
      maxEntryBytes: 8 << 20,
      maxImagePixels: 4_000_000,
      ...overrides.limits,
    },
    nonFinite: 'fail',
    scaleUint8: true,
    image: { size: 8, color: 'gray', fit: 'cover', onBadImage: 'fail', thumbnailSize: 16, ...overrides.image },
  };
}

export type Rgb = [number, number, number];

export function png(width: number, height: number, [r, g, b]: Rgb): Promise<Buffer> {
  return sharp({ create: { width, height, channels: 3, background: { r, g, b } } }).png().toBuffer();
}

/**
 * A tar of `count` size×size PNG swatches named img-<i>.png, coloured red, green, blue in turn:
 * three clusters, one per colour (row i is colour i mod 3).
 */
export async function swatchTar(count: number, size = 24): Promise<Buffer> {
  const colours: Rgb[] = [
    [220, 40, 40],
    [40, 200, 60],
    [40, 60, 220],
  ];
  const entries = [];
  for (let i = 0; i < count; i++) entries.push({ name: `img-${i}.png`, data: await png(size, size, colours[i % 3]) });
  return buildTar(entries);
}

export function jpeg(width: number, height: number, [r, g, b]: Rgb): Promise<Buffer> {
  return sharp({ create: { width, height, channels: 3, background: { r, g, b } } }).jpeg({ quality: 95 }).toBuffer();
}

/** A PNG whose IHDR (with a valid CRC) declares width × height, followed by a tiny IDAT and IEND. */
export function pngHeaderOnly(width: number, height: number): Buffer {
  const chunk = (type: string, data: Buffer): Buffer => {
    const body = Buffer.concat([Buffer.from(type, 'latin1'), data]);
    const out = Buffer.alloc(12 + data.length);
    out.writeUInt32BE(data.length, 0);
    body.copy(out, 4);
    out.writeUInt32BE(crc32(body), 8 + data.length);
    return out;
  };
  const ihdr = Buffer.alloc(13);
  ihdr.writeUInt32BE(width, 0);
  ihdr.writeUInt32BE(height, 4);
  ihdr.set([8, 2, 0, 0, 0], 8); // 8-bit RGB, deflate, adaptive filter, no interlace
  const signature = Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);
  return Buffer.concat([signature, chunk('IHDR', ihdr), chunk('IDAT', deflateRawSync(Buffer.alloc(64))), chunk('IEND', Buffer.alloc(0))]);
}

export interface ZipSpec {
  name: string;
  data?: Buffer;
  /** Default 'deflate'. */
  method?: 'store' | 'deflate';
  /** Unix mode stored in the high bits of the external attributes (default 0o100644). */
  mode?: number;
  /** Uncompressed size to claim in both headers, instead of the true one. */
  declaredSize?: number;
}

/** A minimal zip writer (no zip64, no data descriptors), enough to build good and hostile archives. */
export function buildZip(specs: ZipSpec[]): Buffer {
  const locals: Buffer[] = [];
  const centrals: Buffer[] = [];
  let offset = 0;
  for (const spec of specs) {
    const data = spec.data ?? Buffer.alloc(0);
    const method = spec.method === 'store' ? 0 : 8;
    const stored = method === 8 ? deflateRawSync(data) : data;
    const name = Buffer.from(spec.name, 'utf8');
    const size = spec.declaredSize ?? data.length;
    const crc = crc32(data);
    const local = Buffer.alloc(30);
    local.writeUInt32LE(0x04034b50, 0);
    local.writeUInt16LE(20, 4);
    local.writeUInt16LE(0x800, 6);
    local.writeUInt16LE(method, 8);
    local.writeUInt32LE(crc, 14);
    local.writeUInt32LE(stored.length, 18);
    local.writeUInt32LE(size, 22);
    local.writeUInt16LE(name.length, 26);
    locals.push(local, name, stored);
    const central = Buffer.alloc(46);
    central.writeUInt32LE(0x02014b50, 0);
    central.writeUInt16LE((3 << 8) | 20, 4); // made by Unix, so the mode bits mean something
    central.writeUInt16LE(20, 6);
    central.writeUInt16LE(0x800, 8);
    central.writeUInt16LE(method, 10);
    central.writeUInt32LE(crc, 16);
    central.writeUInt32LE(stored.length, 20);
    central.writeUInt32LE(size, 24);
    central.writeUInt16LE(name.length, 28);
    central.writeUInt32LE(((spec.mode ?? 0o100644) << 16) >>> 0, 38);
    central.writeUInt32LE(offset, 42);
    centrals.push(central, name);
    offset += 30 + name.length + stored.length;
  }
  const directory = Buffer.concat(centrals);
  const end = Buffer.alloc(22);
  end.writeUInt32LE(0x06054b50, 0);
  end.writeUInt16LE(specs.length, 8);
  end.writeUInt16LE(specs.length, 10);
  end.writeUInt32LE(directory.length, 12);
  end.writeUInt32LE(offset, 16);
  return Buffer.concat([...locals, directory, end]);
}

export interface TarSpec {
  name: string;
  data?: Buffer;
  type?: 'file' | 'directory' | 'symlink' | 'link' | 'fifo' | 'character-device';
  linkname?: string;
}

export async function buildTar(specs: TarSpec[], gzip = false): Promise<Buffer> {
  const pack = tar.pack();
  const parts: Buffer[] = [];
  const done = (async () => {
    for await (const chunk of pack) parts.push(chunk as Buffer);
  })();
  for (const spec of specs) {
    const type = spec.type ?? 'file';
    const data = type === 'file' ? (spec.data ?? Buffer.alloc(0)) : undefined;
    await new Promise<void>((resolve, reject) => {
      const header = { name: spec.name, type, linkname: spec.linkname, size: data?.length ?? 0 };
      const callback = (err?: Error | null): void => (err ? reject(err) : resolve());
      if (data) pack.entry(header, data, callback);
      else pack.entry(header, callback); // links, folders, devices: no body
    });
  }
  pack.finalize();
  await done;
  const plain = Buffer.concat(parts);
  return gzip ? gzipSync(plain) : plain;
}

/** A temp folder removed by the returned cleanup. */
export function tempDir(): { dir: string; write: (name: string, bytes: Buffer) => string; cleanup: () => void } {
  const dir = mkdtempSync(join(tmpdir(), 'cairn-archive-'));
  return {
    dir,
    write: (name, bytes) => {
      const path = join(dir, name);
      writeFileSync(path, bytes);
      return path;
    },
    cleanup: () => rmSync(dir, { recursive: true, force: true }),
  };
}

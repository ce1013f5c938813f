import sharp from 'sharp';
import { describe, expect, it } from 'vitest';
import { CairnError } from '../../src/errors.js';
import { decodeImage } from '../../src/data/image-features.js';
import { readImageSize, sniffImageKind } from '../../src/data/image-header.js';
import { jpeg, png, pngHeaderOnly, readOptions } from './archive-fixtures.js';

/** The image helpers under the archive readers: header sizes without decoding, and the decode itself. */
describe('image headers', () => {
  it('reads PNG and JPEG sizes, also past EXIF and ICC segments', async () => {
    expect(readImageSize(await png(31, 17, [1, 2, 3]))).toEqual({ width: 31, height: 17 });
    expect(readImageSize(await jpeg(40, 24, [1, 2, 3]))).toEqual({ width: 40, height: 24 });
    const tagged = await sharp({ create: { width: 50, height: 20, channels: 3, background: '#123456' } })
      .withExif({ IFD0: { Copyright: 'test' } })
      .withIccProfile('srgb')
      .jpeg({ progressive: true })
      .toBuffer();
    expect(readImageSize(tagged)).toEqual({ width: 50, height: 20 });
    expect(readImageSize(pngHeaderOnly(50_000, 40_000))).toEqual({ width: 50_000, height: 40_000 });
  });

  it('recognises images by magic bytes only, and gives null for anything unreadable', async () => {
    expect(sniffImageKind(await png(2, 2, [0, 0, 0]))).toBe('png');
    expect(sniffImageKind(await jpeg(2, 2, [0, 0, 0]))).toBe('jpeg');
    expect(sniffImageKind(Buffer.from('GIF89a..'))).toBeNull();
    expect(readImageSize(Buffer.from([0xff, 0xd8, 0xff, 0xd9]))).toBeNull();
    expect(readImageSize(pngHeaderOnly(4, 4).subarray(0, 20))).toBeNull();
    expect(readImageSize(Buffer.alloc(0))).toBeNull();
  });
});

describe('image decoding', () => {
  const image = readOptions().image;

  it('refuses too many pixels from the header, for JPEG too', async () => {
    const big = await jpeg(300, 200, [9, 9, 9]);
    const err = await decodeImage(big, 'big.jpg', image, 50_000, false).catch((e: unknown) => e);
    expect(err).toBeInstanceOf(CairnError);
    expect((err as CairnError).code).toBe('IMAGE_TOO_MANY_PIXELS');
    expect((await decodeImage(big, 'big.jpg', image, 60_000, false)).features.length).toBe(64);
  });

  it('turns a grayscale PNG into 3·size² equal RGB values, and alpha into black', async () => {
    const gray = await sharp(Buffer.alloc(16, 200), { raw: { width: 4, height: 4, channels: 1 } }).png().toBuffer();
    const { features } = await decodeImage(gray, 'g.png', { ...image, size: 2, color: 'rgb' }, 1e6, false);
    expect(Array.from(features)).toEqual(new Array(12).fill(200 / 255).map(Math.fround));
    const clear = await sharp({ create: { width: 4, height: 4, channels: 4, background: { r: 255, g: 255, b: 255, alpha: 0 } } }).png().toBuffer();
    expect(Array.from((await decodeImage(clear, 'c.png', { ...image, size: 2 }, 1e6, true)).features)).toEqual([0, 0, 0, 0]);
  });
});

import sharp from 'sharp';
import { describe, expect, it } from 'vitest';
import { batchDims, batchTensor, decodePixels, imageToTensor, pixelsToTensor } from '../../src/embed/image-tensor.js';
import type { ModelInput } from '../../src/embed/model-description.js';
import { solidPng } from './embed-fixtures.js';

const rgb = (over: Partial<ModelInput> = {}): ModelInput => ({
  name: 'image',
  size: 8,
  channels: 'rgb',
  layout: 'nchw',
  range: '0-1',
  mean: [0.5, 0.5, 0.5],
  std: [0.25, 0.25, 0.25],
  ...over,
});

/** Every value of `v` at the given indices. */
const at = (v: Float32Array, indices: number[]) => indices.map((i) => v[i]);

describe('image tensor', () => {
  // A solid (R, G, B) = (255, 51, 0) 8×8 image, already model size, so resizing changes nothing.
  const colour: [number, number, number] = [255, 51, 0];

  it('nchw, range 0-1: (p/255 − 0.5)/0.25 per channel, channel planes one after another', async () => {
    // R: 255/255 = 1 → (1 − 0.5)/0.25 = 2;  G: 51/255 = 0.2 → (0.2 − 0.5)/0.25 = −1.2 (as float32);
    // B: 0 → (0 − 0.5)/0.25 = −2. Planes of 64 values: R R … G G … B B …
    const t = await imageToTensor(await solidPng(8, 8, colour), rgb());
    expect(t.length).toBe(3 * 64);
    expect(new Set(t.subarray(0, 64))).toEqual(new Set([2]));
    expect(new Set(t.subarray(64, 128))).toEqual(new Set([Math.fround(-1.2)]));
    expect(new Set(t.subarray(128, 192))).toEqual(new Set([-2]));
  });

  it('nhwc, range 0-255, per-channel mean/std: values interleaved R G B per pixel', async () => {
    // mean (128, 64, 0), std (64, 32, 1): R (255 − 128)/64 = 1.984375; G (51 − 64)/32 = −0.40625;
    // B (0 − 0)/1 = 0; all exact in float32. Pixel by pixel: 1.984375, −0.40625, 0, 1.984375, …
    const t = await imageToTensor(await solidPng(8, 8, colour), rgb({ layout: 'nhwc', range: '0-255', mean: [128, 64, 0], std: [64, 32, 1] }));
    expect(t.length).toBe(3 * 64);
    for (let i = 0; i < 64; i++) expect(at(t, [3 * i, 3 * i + 1, 3 * i + 2])).toEqual([1.984375, -0.40625, 0]);
  });

  it('gray: one channel, one mean/std for it', async () => {
    // A gray (51, 51, 51) image has luminance 51: (51 − 0)/17 = 3.
    const t = await imageToTensor(await solidPng(8, 8, [51, 51, 51]), rgb({ channels: 'gray', range: '0-255', mean: [0], std: [17] }));
    expect(t.length).toBe(64);
    expect(new Set(t)).toEqual(new Set([3]));
  });

  it('flattens transparency onto black, as ingestion does', async () => {
    // Fully transparent white: flattened onto black → pixel 0 → (0 − 0.5)/0.25 = −2 (dropping alpha alone would give white: +2).
    const png = await sharp({ create: { width: 8, height: 8, channels: 4, background: { r: 255, g: 255, b: 255, alpha: 0 } } }).png().toBuffer();
    expect(new Set(await imageToTensor(png, rgb()))).toEqual(new Set([-2]));
  });

  it("fits with 'cover': a 16×8 image is cropped to its centre 8 columns, no padding", async () => {
    // Columns 0–7 red, 8–15 blue; scale max(8/16, 8/8) = 1, so the centre crop keeps columns 4–11: 4 red then 4 blue per row.
    const half = Buffer.alloc(16 * 8 * 3);
    for (let y = 0; y < 8; y++) for (let x = 0; x < 16; x++) half[(y * 16 + x) * 3 + (x < 8 ? 0 : 2)] = 255;
    const png = await sharp(half, { raw: { width: 16, height: 8, channels: 3 } }).png().toBuffer();
    const pixels = await decodePixels(png, rgb());
    expect(pixels.length).toBe(8 * 8 * 3);
    for (let y = 0; y < 8; y++) {
      for (let x = 0; x < 8; x++) expect(Array.from(pixels.subarray((y * 8 + x) * 3, (y * 8 + x) * 3 + 3))).toEqual(x < 4 ? [255, 0, 0] : [0, 0, 255]);
    }
  });

  it('places pixel (y, x) channel c at c·size² + y·size + x in nchw and at (y·size + x)·3 + c in nhwc', () => {
    // 2×2 pixels, value 10·(pixel index) + channel; range 0-255, mean 0, std 1 leaves values as they are.
    const pixels = Uint8Array.from({ length: 12 }, (_, i) => 10 * Math.floor(i / 3) + (i % 3));
    const input = rgb({ size: 2, range: '0-255', mean: [0], std: [1] });
    expect(Array.from(pixelsToTensor(pixels, input))).toEqual([0, 10, 20, 30, 1, 11, 21, 31, 2, 12, 22, 32]);
    expect(Array.from(pixelsToTensor(pixels, { ...input, layout: 'nhwc' }))).toEqual(Array.from(pixels));
  });

  it('batches images one after another and zero-pads up to a fixed batch', () => {
    const input = rgb({ size: 2, channels: 'gray', range: '0-255', mean: [1], std: [2] });
    const images = [Uint8Array.of(1, 3, 5, 7), Uint8Array.of(9, 11, 13, 15)];
    // (p − 1)/2 for each pixel, then a third, padded slot of zeros.
    expect(Array.from(batchTensor(images, input, 3))).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 0, 0, 0, 0]);
    expect(batchDims(input, 3)).toEqual([3, 1, 2, 2]);
    expect(batchDims({ ...input, layout: 'nhwc' }, 3)).toEqual([3, 2, 2, 1]);
  });

  it('rejects pixels of the wrong size', () => {
    expect(() => pixelsToTensor(new Uint8Array(5), rgb({ size: 2 }))).toThrow(RangeError);
  });
});

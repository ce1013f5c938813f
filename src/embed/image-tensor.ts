import sharp from 'sharp';
import { channelCount, imageTensorLength, type ModelInput } from './model-description.js';

/**
 * Image → input tensor, in two steps so the arithmetic can be tested without a decoder:
 * `decodePixels` (sharp) gives size×size 8-bit pixels, row-major HWC; `pixelsToTensor` (pure)
 * applies range, mean/std and layout as the model description says.
 */

/** Largest source image decoded for a model: thumbnails are 128 px; this only stops decompression bombs. */
const MAX_INPUT_PIXELS = 64 * 1024 * 1024;

/**
 * Decodes a PNG / JPEG (any format sharp reads) to size×size×channels bytes. Transparency is
 * flattened onto black, as at ingestion (src/data/image-features.ts), so a thumbnail and the
 * ingested features see the same picture; 'cover' fills the square and crops the centre, so the
 * model never sees padding it was not trained with. Gray is libvips' luminance of the sRGB image.
 */
export async function decodePixels(bytes: Buffer | Uint8Array, input: ModelInput): Promise<Uint8Array> {
  const channels = channelCount(input);
  const pipeline = sharp(bytes, { limitInputPixels: MAX_INPUT_PIXELS })
    .autoOrient()
    .flatten({ background: '#000000' })
    .resize(input.size, input.size, { fit: 'cover' });
  const { data, info } = await (channels === 3 ? pipeline.toColourspace('srgb') : pipeline.grayscale())
    .raw({ depth: 'uchar' })
    .toBuffer({ resolveWithObject: true });
  if (info.channels !== channels || info.width !== input.size || info.height !== input.size) {
    throw new Error(`unexpected decoder output: ${info.width}×${info.height}×${info.channels}, wanted ${input.size}×${input.size}×${channels}`);
  }
  return new Uint8Array(data.buffer, data.byteOffset, data.length);
}

/**
 * One image's tensor values: v = (p·scale − mean[c]) / std[c], scale = 1/255 for range '0-1' and
 * 1 for '0-255', computed in float64 and rounded once to float32; written channel-planar (nchw:
 * [c][y][x]) or interleaved (nhwc: [y][x][c]). `pixels` are row-major HWC bytes as from
 * decodePixels. Writes into `out` at `offset` (a batch buffer) or a new array.
 */
export function pixelsToTensor(pixels: Uint8Array, input: ModelInput, out?: Float32Array, offset = 0): Float32Array {
  const channels = channelCount(input);
  const plane = input.size * input.size;
  const length = imageTensorLength(input);
  if (pixels.length !== length) throw new RangeError(`pixelsToTensor: ${pixels.length} bytes, expected ${length} (${input.size}² × ${channels})`);
  const target = out ?? new Float32Array(length);
  if (offset + length > target.length) throw new RangeError(`pixelsToTensor: no room for ${length} values at ${offset} in ${target.length}`);
  const scale = input.range === '0-1' ? 1 / 255 : 1;
  for (let c = 0; c < channels; c++) {
    // One mean / std value stands for every channel (schema: 1 or 3 values).
    const mean = input.mean[input.mean.length === 1 ? 0 : c];
    const std = input.std[input.std.length === 1 ? 0 : c];
    for (let i = 0; i < plane; i++) {
      const v = ((pixels[i * channels + c] * scale) - mean) / std;
      target[offset + (input.layout === 'nchw' ? c * plane + i : i * channels + c)] = v;
    }
  }
  return target;
}

/** The input tensor of a batch: images one after another, each as pixelsToTensor writes it. */
export function batchTensor(images: readonly Uint8Array[], input: ModelInput, batch = images.length): Float32Array {
  if (batch < images.length) throw new RangeError(`batchTensor: ${images.length} images do not fit a batch of ${batch}`);
  const length = imageTensorLength(input);
  // Slots past images.length stay 0: the padding of a model with a fixed batch size.
  const out = new Float32Array(batch * length);
  images.forEach((pixels, j) => pixelsToTensor(pixels, input, out, j * length));
  return out;
}

/** Dimensions of a batch tensor in the description's layout. */
export function batchDims(input: ModelInput, batch: number): [number, number, number, number] {
  const c = channelCount(input);
  return input.layout === 'nchw' ? [batch, c, input.size, input.size] : [batch, input.size, input.size, c];
}

/** Convenience for one encoded image: decode, then pixelsToTensor. */
export async function imageToTensor(bytes: Buffer | Uint8Array, input: ModelInput): Promise<Float32Array> {
  return pixelsToTensor(await decodePixels(bytes, input), input);
}

import { mkdir, mkdtemp, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import sharp from 'sharp';
import { expect } from 'vitest';
import { Rng } from '../../src/core/random.js';
import type { ModelDescriptionInput } from '../../src/embed/model-description.js';
import { DataType, OnnxGraphBuilder, attr } from '../../src/compute/onnx-builder.js';
import { CairnError } from '../../src/errors.js';

/** A scratch folder; remove it with cleanup(). */
export async function scratchDir(prefix: string): Promise<{ dir: string; cleanup(): Promise<void> }> {
  const dir = await mkdtemp(join(tmpdir(), prefix));
  return { dir, cleanup: () => rm(dir, { recursive: true, force: true }) };
}

/** Writes `<name>.json` (the description as given, unvalidated) and, when given, its .onnx file. */
export async function writeModel(dir: string, description: ModelDescriptionInput | Record<string, unknown>, onnx?: Uint8Array): Promise<void> {
  const d = description as { name: string; file: string };
  await writeFile(join(dir, `${d.name}.json`), JSON.stringify(description));
  if (onnx) await writeFile(join(dir, d.file), onnx);
}

/** A description for the tiny graphs below: gray 8×8 nchw, pixels as they are (0-255, mean 0, std 1). */
export function tinyDescription(name: string, output: ModelDescriptionInput['output'], extra: Partial<ModelDescriptionInput> = {}): ModelDescriptionInput {
  return {
    name,
    file: `${name}.onnx`,
    input: { name: 'image', size: 8, channels: 'gray', layout: 'nchw', range: '0-255', mean: [0], std: [1] },
    output,
    ...extra,
  };
}

/** image [batch,1,8,8] → Flatten → 'vector' [batch,64]: the embedding is the preprocessed image itself. */
export function flattenModel(batch: number | string = 'batch'): Uint8Array {
  const g = new OnnxGraphBuilder();
  const x = g.input('image', DataType.FLOAT, [batch, 1, 8, 8]);
  g.op('Flatten', [x], [attr.i('axis', 1)], 'vector');
  g.output('vector', DataType.FLOAT, [batch, 64]);
  return g.encode('flatten');
}

/** image [batch,1,8,8] → ArgMax over the rows (axis 2) → 'label' int64 [batch,1,8]. */
export function argMaxModel(): Uint8Array {
  const g = new OnnxGraphBuilder();
  const x = g.input('image', DataType.FLOAT, ['batch', 1, 8, 8]);
  g.op('ArgMax', [x], [attr.i('axis', 2), attr.i('keepdims', 0)], 'label');
  g.output('label', DataType.INT64, ['batch', 1, 8]);
  return g.encode('argmax');
}

/** 'vector' = image × NaN: non-finite for every input, so also on the registry's probe batch. */
export function nanModel(): Uint8Array {
  const g = new OnnxGraphBuilder();
  const x = g.input('image', DataType.FLOAT, ['batch', 1, 8, 8]);
  const flat = g.op('Flatten', [x], [attr.i('axis', 1)]);
  g.op('Mul', [flat, g.floats(Float32Array.of(NaN), [])], [], 'vector');
  g.output('vector', DataType.FLOAT, ['batch', 64]);
  return g.encode('nan');
}

/**
 * 'vector' = sqrt(200 − pixel): finite on the probe batch (pixels 0 and 128) but NaN for any
 * pixel above 200, e.g. a white thumbnail; so it passes validation and fails at job time.
 */
export function sqrtModel(): Uint8Array {
  const g = new OnnxGraphBuilder();
  const x = g.input('image', DataType.FLOAT, ['batch', 1, 8, 8]);
  const flat = g.op('Flatten', [x], [attr.i('axis', 1)]);
  g.op('Sqrt', [g.op('Sub', [g.floats(Float32Array.of(200), []), flat])], [], 'vector');
  g.output('vector', DataType.FLOAT, ['batch', 64]);
  return g.encode('sqrt');
}

/**
 * A 128-px thumbnail PNG (the size ingestion writes): a colour gradient whose direction and hues
 * depend on `seed`, plus uniform noise, so different seeds give clearly different embeddings.
 */
export async function thumbnailPng(seed: number, size = 128): Promise<Buffer> {
  const rng = new Rng(seed);
  const pixels = Buffer.alloc(size * size * 3);
  const [a, b] = [rng.next() * 2 - 1, rng.next() * 2 - 1];
  const hue = [rng.next(), rng.next(), rng.next()];
  for (let y = 0; y < size; y++) {
    for (let x = 0; x < size; x++) {
      const t = 0.5 + 0.5 * Math.sin((a * x + b * y) / 9);
      for (let c = 0; c < 3; c++) pixels[(y * size + x) * 3 + c] = Math.min(255, Math.floor(255 * t * hue[c] + 40 * rng.next()));
    }
  }
  return sharp(pixels, { raw: { width: size, height: size, channels: 3 } }).png().toBuffer();
}

/** A solid-colour PNG. */
export function solidPng(width: number, height: number, rgb: [number, number, number]): Promise<Buffer> {
  const [r, g, b] = rgb;
  return sharp({ create: { width, height, channels: 3, background: { r, g, b } } }).png().toBuffer();
}

/** Writes `<dir>/<row>.png` for every row in `rows`, from `png(row)`. */
export async function writeThumbnails(dir: string, rows: number[], png: (row: number) => Promise<Buffer>): Promise<void> {
  await mkdir(dir, { recursive: true });
  for (const row of rows) await writeFile(join(dir, `${row}.png`), await png(row));
}

/** Awaits `promise` and expects a CairnError with this code; returns it for further checks. */
export async function expectCode(promise: Promise<unknown> | (() => unknown), code: string): Promise<CairnError> {
  let thrown: unknown = null;
  try {
    await (typeof promise === 'function' ? promise() : promise);
  } catch (err) {
    thrown = err;
  }
  expect(thrown).toBeInstanceOf(CairnError);
  expect((thrown as CairnError).code).toBe(code);
  return thrown as CairnError;
}

/** Largest |a − b| over a vector, relative to the largest |b| (see the tolerance notes in the tests). */
export function maxRelativeError(a: Float32Array, b: Float32Array): number {
  expect(a.length).toBe(b.length);
  let err = 0;
  let scale = 0;
  for (let i = 0; i < a.length; i++) {
    err = Math.max(err, Math.abs(a[i] - b[i]));
    scale = Math.max(scale, Math.abs(b[i]));
  }
  return err / scale;
}

import { mkdir, readFile } from 'node:fs/promises';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildDemoModel } from '../../src/embed/demo-model.js';
import { demoModelForward } from '../../src/embed/demo-model-reference.js';
import { embedRows, openModelSession, thumbnailPath } from '../../src/embed/embedder.js';
import { imageToTensor } from '../../src/embed/image-tensor.js';
import { ModelRegistry } from '../../src/embed/model-registry.js';
import { expectCode, flattenModel, maxRelativeError, scratchDir, solidPng, sqrtModel, thumbnailPng, tinyDescription, writeModel, writeThumbnails } from './embed-fixtures.js';

const DIM = 64;
/** As in demo-model.test.ts: float32 accumulation order in ORT vs float64 in the reference. */
const TOLERANCE = 1e-4;
const quiet = { info: () => undefined, warn: () => undefined } as unknown as Parameters<typeof ModelRegistry.load>[1];

describe('embedRows', () => {
  const { onnx, description: demo } = buildDemoModel();
  let scratch: Awaited<ReturnType<typeof scratchDir>>;
  let registry: ModelRegistry;
  let thumbs: string;

  beforeAll(async () => {
    scratch = await scratchDir('cairn-embed-');
    const models = join(scratch.dir, 'models');
    thumbs = join(scratch.dir, 'thumbs');
    // Rows 0–6 exist; 7 does not. The tiny thumbnails are dark (gray < 200) except row 3, which is white.
    await writeThumbnails(thumbs, [0, 1, 2, 3, 4, 5, 6], (row) => thumbnailPng(100 + row));
    await writeThumbnails(join(scratch.dir, 'tiny-thumbs'), [0, 1, 2, 3, 4], (row) => solidPng(16, 16, row === 3 ? [255, 255, 255] : [30 * row, 60, 120 - 20 * row]));
    await mkdir(models);
    await writeModel(models, { ...demo, batchSize: 2 }, onnx);
    await writeModel(models, { ...demo, name: 'demo-unit', normalize: true, batchSize: 3 });
    await writeModel(models, tinyDescription('sqrt', { name: 'vector', pooling: 'none', dim: 64 }, { batchSize: 2 }), sqrtModel());
    await writeModel(models, tinyDescription('fixed-batch', { name: 'vector', pooling: 'none', dim: 64 }), flattenModel(3));
    registry = await ModelRegistry.load(models, quiet);
  });
  afterAll(() => scratch.cleanup());

  /** The reference: each thumbnail decoded and preprocessed the same way, through the plain-TS network. */
  async function referenceVectors(rows: number[]): Promise<Float32Array> {
    const tensors = await Promise.all(rows.map(async (row) => imageToTensor(await readFile(thumbnailPath(thumbs, row)), demo.input)));
    const input = new Float32Array(tensors.length * tensors[0].length);
    tensors.forEach((t, i) => input.set(t, i * t.length));
    return demoModelForward(input);
  }

  it('embeds rows {start 2, count 5} in batches of 2 as the plain-TS forward pass does', async () => {
    const progress: number[] = [];
    const got = await embedRows(registry.get('cairn-demo-conv'), thumbs, { start: 2, count: 5 }, { threads: 1, onProgress: (done) => progress.push(done) });
    expect(got.length).toBe(5 * DIM);
    expect(progress).toEqual([2, 4, 5]);
    const want = await referenceVectors([2, 3, 4, 5, 6]);
    for (let i = 0; i < 5; i++) {
      expect(maxRelativeError(got.subarray(i * DIM, (i + 1) * DIM), want.subarray(i * DIM, (i + 1) * DIM))).toBeLessThan(TOLERANCE);
    }
    // Rows differ from each other, so a row shifted by one would not match.
    expect(maxRelativeError(want.subarray(0, DIM), want.subarray(DIM, 2 * DIM))).toBeGreaterThan(0.05);
  });

  it('reuses a session passed in, and leaves it open for the caller', async () => {
    const model = registry.get('cairn-demo-conv');
    const session = await openModelSession(model, 1);
    try {
      const a = await embedRows(model, thumbs, { start: 0, count: 3 }, { threads: 1, session });
      const b = await embedRows(model, thumbs, { start: 1, count: 2 }, { threads: 1, session });
      expect(Array.from(b)).toEqual(Array.from(a.subarray(DIM)));
    } finally {
      await session.release();
    }
  });

  it('with normalize: true gives unit L2 norms in the same directions', async () => {
    const [unit, raw] = await Promise.all([
      embedRows(registry.get('demo-unit'), thumbs, { start: 0, count: 7 }, { threads: 1 }),
      embedRows(registry.get('cairn-demo-conv'), thumbs, { start: 0, count: 7 }, { threads: 1 }),
    ]);
    for (let i = 0; i < 7; i++) {
      const u = unit.subarray(i * DIM, (i + 1) * DIM);
      const r = raw.subarray(i * DIM, (i + 1) * DIM);
      const norm = Math.hypot(...r);
      expect(norm).toBeGreaterThan(1.5);
      expect(Math.hypot(...u)).toBeCloseTo(1, 6);
      for (let j = 0; j < DIM; j++) expect(u[j]).toBeCloseTo(r[j] / norm, 6);
    }
  });

  it('pads the last batch of a model with a fixed batch size and drops the padding', async () => {
    // The flatten model's vector is the preprocessed 8×8 gray image itself (0-255, mean 0, std 1).
    const model = registry.get('fixed-batch');
    const dir = join(scratch.dir, 'tiny-thumbs');
    const progress: number[] = [];
    const got = await embedRows(model, dir, { start: 0, count: 5 }, { threads: 1, onProgress: (d) => progress.push(d) });
    expect(progress).toEqual([3, 5]);
    const want = await Promise.all([0, 1, 2, 3, 4].map(async (row) => imageToTensor(await readFile(thumbnailPath(dir, row)), model.description.input)));
    want.forEach((w, i) => expect(Array.from(got.subarray(i * 64, (i + 1) * 64))).toEqual(Array.from(w)));
  });

  it('throws EMBEDDING_NON_FINITE naming the row when the model gives NaN', async () => {
    // sqrt(200 − pixel) is NaN for the white thumbnail of row 3 only.
    const err = await expectCode(embedRows(registry.get('sqrt'), join(scratch.dir, 'tiny-thumbs'), { start: 0, count: 5 }, { threads: 1 }), 'EMBEDDING_NON_FINITE');
    expect(err.details).toMatchObject({ model: 'sqrt', row: 3 });
    expect(err.status).toBe(422);
  });

  it('throws DATASET_NOT_IMAGES for a missing thumbnail, naming the row', async () => {
    const err = await expectCode(embedRows(registry.get('cairn-demo-conv'), thumbs, { start: 5, count: 3 }, { threads: 1 }), 'DATASET_NOT_IMAGES');
    expect(err.details).toMatchObject({ row: 7 });
    expect(err.status).toBe(409);
    await expectCode(embedRows(registry.get('cairn-demo-conv'), join(scratch.dir, 'no-thumbs'), { start: 0, count: 1 }, { threads: 1 }), 'DATASET_NOT_IMAGES');
  });

  it('throws SELECTION_CANCELLED for an aborted signal, before the first batch or between batches', async () => {
    const model = registry.get('cairn-demo-conv');
    await expectCode(embedRows(model, thumbs, { start: 0, count: 4 }, { threads: 1, signal: AbortSignal.abort() }), 'SELECTION_CANCELLED');
    const controller = new AbortController();
    const progress: number[] = [];
    const run = embedRows(model, thumbs, { start: 0, count: 7 }, {
      threads: 1,
      signal: controller.signal,
      onProgress: (done) => {
        progress.push(done);
        controller.abort();
      },
    });
    await expectCode(run, 'SELECTION_CANCELLED');
    expect(progress).toEqual([2]);
  });

  it('refuses a model whose file changed after validation (MODEL_INVALID)', async () => {
    const { dir, cleanup } = await scratchDir('cairn-embed-changed-');
    try {
      await writeModel(dir, demo, onnx);
      const changed = await ModelRegistry.load(dir, quiet);
      await writeModel(dir, demo, flattenModel());
      await expectCode(embedRows(changed.get('cairn-demo-conv'), thumbs, { start: 0, count: 1 }, { threads: 1 }), 'MODEL_INVALID');
    } finally {
      await cleanup();
    }
  });
});

import * as ort from 'onnxruntime-node';
import sharp from 'sharp';
import { describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import { buildDemoModel } from '../../src/embed/demo-model.js';
import { demoModelForward } from '../../src/embed/demo-model-reference.js';
import { imageToTensor } from '../../src/embed/image-tensor.js';
import { maxRelativeError } from './embed-fixtures.js';

const IMAGE = 3 * 64 * 64;
const DIM = 64;
/**
 * ORT sums the convolutions in float32 in its own order (im2col + MLAS Gemm); the reference sums
 * in float64. Float32 accumulation over ≤ 288 products per output keeps the difference near 1e-6
 * of the values' scale; 1e-4 leaves room for that and still fails on any wrong weight, pad or stride.
 * The error is taken relative to each image's largest output, because after Relu and averaging
 * single outputs can be near zero, where an elementwise relative error means nothing.
 */
const TOLERANCE = 1e-4;

async function runOrt(onnx: Uint8Array, input: Float32Array, n: number): Promise<Float32Array> {
  const session = await ort.InferenceSession.create(onnx);
  try {
    const out = await session.run({ image: new ort.Tensor('float32', input, [n, 3, 64, 64]) });
    expect(out.embedding.dims).toEqual([n, DIM]);
    return out.embedding.data as Float32Array;
  } finally {
    await session.release();
  }
}

/** Two real pictures: a red disc on a blue ground, and gray vertical stripes. */
async function realPngs(): Promise<Buffer[]> {
  const disc = Buffer.from(
    `<svg xmlns="http://www.w3.org/2000/svg" width="96" height="80"><rect width="96" height="80" fill="#1030c0"/><circle cx="40" cy="44" r="26" fill="#e02010"/></svg>`,
  );
  const stripes = Buffer.alloc(64 * 64 * 3);
  for (let i = 0; i < 64 * 64; i++) stripes.fill(Math.floor(i % 64 / 8) % 2 ? 230 : 20, i * 3, i * 3 + 3);
  return Promise.all([
    sharp(disc).png().toBuffer(),
    sharp(stripes, { raw: { width: 64, height: 64, channels: 3 } }).png().toBuffer(),
  ]);
}

describe('demo embedding model', () => {
  const { onnx, description } = buildDemoModel();

  it('builds the same bytes every time (weights come from a fixed seed)', () => {
    expect(Buffer.from(buildDemoModel().onnx).equals(Buffer.from(onnx))).toBe(true);
  });

  it('computes in onnxruntime what the plain TypeScript forward pass computes, on random tensors', async () => {
    const n = 3;
    const rng = new Rng(7);
    // Normalised inputs lie in about −2…2 (mean 0.5, std 0.25 on 0..1 pixels).
    const input = Float32Array.from({ length: n * IMAGE }, () => 2 * rng.normal());
    const got = await runOrt(onnx, input, n);
    const want = demoModelForward(input);
    for (let b = 0; b < n; b++) {
      const row = (v: Float32Array) => v.subarray(b * DIM, (b + 1) * DIM);
      expect(maxRelativeError(row(got), row(want))).toBeLessThan(TOLERANCE);
    }
  });

  it('computes in onnxruntime what the plain TypeScript forward pass computes, on two real PNGs', async () => {
    const tensors = await Promise.all((await realPngs()).map((png) => imageToTensor(png, description.input)));
    const input = new Float32Array(2 * IMAGE);
    tensors.forEach((t, i) => input.set(t, i * IMAGE));
    const got = await runOrt(onnx, input, 2);
    const want = demoModelForward(input);
    const [a, b] = [want.subarray(0, DIM), want.subarray(DIM)];
    expect(maxRelativeError(got.subarray(0, DIM), a)).toBeLessThan(TOLERANCE);
    expect(maxRelativeError(got.subarray(DIM), b)).toBeLessThan(TOLERANCE);
    // The match is not the trivial one: the pictures give clearly different, mostly non-zero vectors.
    expect(maxRelativeError(b, a)).toBeGreaterThan(0.1);
    expect(a.filter((v) => v > 0).length).toBeGreaterThan(DIM / 2);
  });
});

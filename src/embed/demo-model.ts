import { Rng } from '../core/random.js';
import type { ModelDescription } from './model-description.js';
import { DataType, OnnxGraphBuilder, attr } from '../compute/onnx-builder.js';

/**
 * A small fixed convolutional feature extractor built in code, so tests and the demo have a real
 * ONNX embedding model without downloading one. It is not trained: the first layer holds a few
 * hand-set oriented-edge and colour-opponent filters (so images that differ in edges or colour
 * land apart) and the rest are He-scaled normal weights from the project's seeded generator, so
 * every build produces the same bytes.
 *
 *   image [N,3,64,64] → Conv3×3/2 (3→16) → Relu → Conv3×3/2 (16→32) → Relu
 *                     → Conv3×3/2 (32→64) → Relu → GlobalAveragePool [N,64,1,1] → Flatten → embedding [N,64]
 */

export const DEMO_MODEL_NAME = 'cairn-demo-conv';
export const DEMO_INPUT_SIZE = 64;
/** Every conv: 3×3 kernel, stride 2, one pixel of zero padding on each side (64 → 32 → 16 → 8). */
export const DEMO_CONV = { kernel: 3, stride: 2, pad: 1 } as const;
export const DEMO_CHANNELS = [3, 16, 32, 64] as const;
const SEED = 0xca12;

export interface ConvLayer {
  inChannels: number;
  outChannels: number;
  /** [out, in, 3, 3], row-major. */
  weight: Float32Array;
  /** [out]. */
  bias: Float32Array;
}

export const demoModelDescription = (): ModelDescription => ({
  name: DEMO_MODEL_NAME,
  file: `${DEMO_MODEL_NAME}.onnx`,
  input: { name: 'image', size: DEMO_INPUT_SIZE, channels: 'rgb', layout: 'nchw', range: '0-1', mean: [0.5, 0.5, 0.5], std: [0.25, 0.25, 0.25] },
  output: { name: 'embedding', pooling: 'none', dim: DEMO_CHANNELS[DEMO_CHANNELS.length - 1] },
  normalize: false,
  batchSize: 32,
});

/** The three conv layers' weights; the same numbers on every call (float32, as stored in the file). */
export function demoModelWeights(): ConvLayer[] {
  const rng = new Rng(SEED);
  const k2 = DEMO_CONV.kernel * DEMO_CONV.kernel;
  return DEMO_CHANNELS.slice(1).map((outChannels, l) => {
    const inChannels = DEMO_CHANNELS[l];
    // He et al. 2015: std √(2 / fan-in) keeps the activation scale roughly constant through Relu layers.
    const std = Math.sqrt(2 / (inChannels * k2));
    const weight = new Float32Array(outChannels * inChannels * k2);
    for (let i = 0; i < weight.length; i++) weight[i] = std * rng.normal();
    const bias = new Float32Array(outChannels);
    for (let o = 0; o < outChannels; o++) bias[o] = 0.1 * rng.normal();
    if (l === 0) setHandFilters(weight, bias);
    return { inChannels, outChannels, weight, bias };
  });
}

/**
 * First-layer filters 0–6: Sobel x / y and the two diagonals on luminance (the mean of R, G, B),
 * then R−G and B−(R+G)/2 opponents and plain luminance, each under a [1 2 1]ᵀ[1 2 1]/16 blur.
 * Inputs are normalised to about −2…2, so these sit at the same scale as the random filters.
 */
function setHandFilters(weight: Float32Array, bias: Float32Array): void {
  const sobelX = [-1, 0, 1, -2, 0, 2, -1, 0, 1];
  const sobelY = [-1, -2, -1, 0, 0, 0, 1, 2, 1];
  const diag = [0, 1, 2, -1, 0, 1, -2, -1, 0];
  const anti = [-2, -1, 0, -1, 0, 1, 0, 1, 2];
  const blur = [1, 2, 1, 2, 4, 2, 1, 2, 1].map((v) => v / 16);
  const lum = [1 / 3, 1 / 3, 1 / 3];
  const filters: Array<[number[], number[]]> = [
    [sobelX.map((v) => v / 4), lum],
    [sobelY.map((v) => v / 4), lum],
    [diag.map((v) => v / 4), lum],
    [anti.map((v) => v / 4), lum],
    [blur, [1, -1, 0]],
    [blur, [-0.5, -0.5, 1]],
    [blur, lum],
  ];
  filters.forEach(([spatial, perChannel], o) => {
    for (let c = 0; c < 3; c++) for (let t = 0; t < 9; t++) weight[(o * 3 + c) * 9 + t] = spatial[t] * perChannel[c];
    bias[o] = 0;
  });
}

/** The serialized model and its description (name 'cairn-demo-conv', output 'embedding', dim 64). */
export function buildDemoModel(): { onnx: Uint8Array; description: ModelDescription } {
  const description = demoModelDescription();
  const g = new OnnxGraphBuilder();
  const s = DEMO_INPUT_SIZE;
  let x = g.input(description.input.name, DataType.FLOAT, ['batch', 3, s, s]);
  const { kernel, stride, pad } = DEMO_CONV;
  const convAttrs = [attr.ints('kernel_shape', [kernel, kernel]), attr.ints('strides', [stride, stride]), attr.ints('pads', [pad, pad, pad, pad])];
  demoModelWeights().forEach((layer, l) => {
    const w = g.floats(layer.weight, [layer.outChannels, layer.inChannels, kernel, kernel], `conv${l + 1}.weight`);
    const b = g.floats(layer.bias, [layer.outChannels], `conv${l + 1}.bias`);
    x = g.op('Relu', [g.op('Conv', [x, w, b], convAttrs, `conv${l + 1}`)], [], `relu${l + 1}`);
  });
  const pooled = g.op('GlobalAveragePool', [x], [], 'pooled');
  g.op('Flatten', [pooled], [attr.i('axis', 1)], description.output.name);
  g.output(description.output.name, DataType.FLOAT, ['batch', description.output.dim]);
  return { onnx: g.encode(DEMO_MODEL_NAME.replace(/-/g, '_')), description };
}

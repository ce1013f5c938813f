import { z } from 'zod';

/**
 * The JSON description that sits next to a user's .onnx file in the models directory and says how
 * to feed the model images and how to read vectors out of it. An ONNX file alone does not say
 * whether it expects 0..1 or 0..255 pixels, which normalisation it was trained with or which of
 * its outputs is the embedding, so nothing is guessed: everything the embedder does is written
 * here. The descriptions below are the documentation; every default is stated where it is declared.
 */

/** Per-channel constants: one value applies to every channel, three are R, G, B. */
const perChannel = (what: string) => z.array(z.number().refine(Number.isFinite, 'must be finite')).min(1).max(3).refine((v) => v.length !== 2, `${what} takes 1 or 3 values`);

export const modelInputSchema = z.strictObject({
  name: z.string().min(1).max(256).describe('Name of the ONNX graph input that takes the image batch.'),
  size: z.number().int().min(8).max(1024).describe('Side in pixels of the square image the model takes; each thumbnail is resized to size×size with fit "cover" (scaled to fill, centre cropped).'),
  channels: z.enum(['rgb', 'gray']).describe('rgb: 3 channels in R, G, B order (sRGB); gray: 1 luminance channel.'),
  layout: z.enum(['nchw', 'nhwc']).describe('Tensor layout: nchw = [batch, channels, size, size] (PyTorch exports); nhwc = [batch, size, size, channels] (TensorFlow exports).'),
  range: z.enum(['0-1', '0-255']).describe('Pixel scale before mean/std: 0-1 divides the 8-bit values by 255, 0-255 keeps them.'),
  mean: perChannel('mean').describe('Subtracted per channel, in the units of `range` (e.g. [0.485, 0.456, 0.406] for ImageNet models at 0-1). 1 value (every channel) or 3 (R, G, B; rgb only).'),
  std: perChannel('std').refine((v) => v.every((s) => s > 0), 'std values must be > 0').describe('Divides per channel after the mean, in the units of `range`; every value > 0. 1 value (every channel) or 3 (R, G, B; rgb only).'),
});

export const modelOutputSchema = z.strictObject({
  name: z.string().min(1).max(256).describe('Name of the ONNX graph output that holds the embeddings; its batch axis must come first.'),
  pooling: z
    .enum(['none', 'mean', 'flatten'])
    .describe(
      'How the output tensor [batch, ...] becomes one vector per image. none: the output must already be [batch, dim]. ' +
        'mean: an output [batch, a1, …, am, dim] is averaged over a1…am (every axis between the batch axis and the last), giving [batch, dim]; ' +
        'this suits token outputs [batch, tokens, dim] and channels-last feature maps [batch, h, w, dim]; a channels-first map [batch, dim, h, w] ' +
        'needs flatten or its pooling inside the model. A [batch, dim] output is kept as it is. ' +
        'flatten: [batch, d1, …, dk] is read row-major as [batch, d1·…·dk].',
    ),
  dim: z.number().int().min(1).max(65_536).describe('Length of each pooled vector; the model is rejected at start-up when its probe run gives another length.'),
});

export const MODEL_NAME_PATTERN = /^[a-z0-9_-]{1,64}$/;

export const modelDescriptionSchema = z
  .strictObject({
    name: z.string().regex(MODEL_NAME_PATTERN, 'must be 1–64 characters from a-z, 0-9, _ and -').describe('The model name jobs use (1–64 characters from a-z, 0-9, _ and -); it must equal the description file name without .json, which keeps names unique.'),
    // A bare file name only: a description must not make the service open files outside the models directory.
    file: z
      .string()
      .regex(/^[A-Za-z0-9_-][A-Za-z0-9._-]{0,250}\.onnx$/, 'must be a file name ending in .onnx, without any directory')
      .describe('The .onnx file, a bare file name in the same directory as the description.'),
    input: modelInputSchema.describe('How images are turned into the input tensor.'),
    output: modelOutputSchema.describe('Which output holds the embeddings and how it is pooled to one vector per image.'),
    normalize: z.boolean().default(false).describe('Scale every vector to unit L2 norm (a zero vector stays zero); use it for models compared by cosine similarity. Default false.'),
    batchSize: z.number().int().min(1).max(1024).default(32).describe('Images per inference call. A model whose batch dimension is fixed in the ONNX file runs at that size instead. Default 32.'),
  })
  .superRefine((d, ctx) => {
    if (d.input.channels === 'gray') {
      for (const key of ['mean', 'std'] as const) {
        if (d.input[key].length !== 1) ctx.addIssue({ code: 'custom', path: ['input', key], message: `a gray model takes one ${key} value` });
      }
    }
  });

export type ModelDescriptionInput = z.input<typeof modelDescriptionSchema>;
export type ModelDescription = z.output<typeof modelDescriptionSchema>;
export type ModelInput = ModelDescription['input'];
export type ModelOutput = ModelDescription['output'];

/** Validation result: the description with defaults filled, or the issues as one readable line. */
export function parseModelDescription(json: unknown): { ok: true; description: ModelDescription } | { ok: false; message: string } {
  const parsed = modelDescriptionSchema.safeParse(json);
  if (parsed.success) return { ok: true, description: parsed.data };
  return { ok: false, message: parsed.error.issues.map((i) => `${i.path.join('.') || '(root)'}: ${i.message}`).join('; ') };
}

/** Channels of the input tensor. */
export function channelCount(input: ModelInput): 1 | 3 {
  return input.channels === 'rgb' ? 3 : 1;
}

/** Floats of one image in the input tensor. */
export function imageTensorLength(input: ModelInput): number {
  return input.size * input.size * channelCount(input);
}

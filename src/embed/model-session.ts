import { createHash } from 'node:crypto';
import { createReadStream } from 'node:fs';
import * as ort from 'onnxruntime-node';
import { batchDims } from './image-tensor.js';
import type { ModelDescription } from './model-description.js';
import { poolOutput } from './output-vectors.js';

/**
 * An onnxruntime session of a user model and one batch through it. Shared by the registry's probe
 * and the embedder, so start-up validation runs exactly the code path jobs run.
 */

/**
 * CPU session options as in src/compute/onnx-backend.ts: one inter-op thread (the graph is a chain)
 * and no spinning intra-op workers, which measurably slowed the next session's calls there.
 */
export function sessionOptions(threads: number): ort.InferenceSession.SessionOptions {
  return {
    executionProviders: ['cpu'],
    intraOpNumThreads: threads,
    interOpNumThreads: 1,
    graphOptimizationLevel: 'all',
    executionMode: 'sequential',
    extra: { session: { intra_op: { allow_spinning: '0' } } },
  };
}

/** Hex SHA-256 of a file, streamed (model files can be hundreds of MB). */
export async function sha256File(path: string): Promise<string> {
  const hash = createHash('sha256');
  for await (const chunk of createReadStream(path)) hash.update(chunk as Buffer);
  return hash.digest('hex');
}

/** Why a batch failed; the registry and the embedder map kinds to their own error codes. */
export class BatchFailure extends Error {
  constructor(readonly kind: 'run' | 'not-float' | 'dim', message: string, options?: { cause?: unknown }) {
    super(message, options);
    this.name = 'BatchFailure';
  }
}

/**
 * Runs one batch tensor (`batch` images, as batchTensor builds it) and returns the pooled vectors
 * (batch × output.dim). Throws BatchFailure: 'run' when onnxruntime fails, 'not-float' when the
 * output is not float32, 'dim' when its batch axis or pooled length disagrees with the description.
 */
export async function runBatch(session: ort.InferenceSession, description: ModelDescription, input: Float32Array, batch: number): Promise<Float32Array> {
  const { input: inSpec, output } = description;
  let result: ort.InferenceSession.ReturnType;
  try {
    const feed = new ort.Tensor('float32', input, batchDims(inSpec, batch));
    result = await session.run({ [inSpec.name]: feed }, [output.name]);
  } catch (cause) {
    throw new BatchFailure('run', `inference failed: ${cause instanceof Error ? cause.message : String(cause)}`, { cause });
  }
  const tensor = result[output.name];
  if (!tensor || tensor.type !== 'float32') throw new BatchFailure('not-float', `output '${output.name}' is ${tensor?.type ?? 'missing'}, not float32`);
  const dims = tensor.dims;
  if (dims[0] !== batch) throw new BatchFailure('dim', `output '${output.name}' has shape [${dims.join(', ')}]; its first axis must be the batch (${batch})`);
  const pooled = poolOutput(tensor.data as Float32Array, dims, output.pooling);
  if (!pooled.ok) throw new BatchFailure('dim', `output '${output.name}': ${pooled.reason}`);
  if (pooled.dim !== output.dim) {
    throw new BatchFailure('dim', `output '${output.name}' has shape [${dims.join(', ')}], which pools ('${output.pooling}') to ${pooled.dim} values per image; the description says ${output.dim}`);
  }
  return pooled.vectors;
}

import { readFile } from 'node:fs/promises';
import { join } from 'node:path';
import * as ort from 'onnxruntime-node';
import { CairnError, requireArg } from '../errors.js';
import { batchTensor, decodePixels } from './image-tensor.js';
import type { ReadyModel } from './model-registry.js';
import { BatchFailure, runBatch, sessionOptions, sha256File } from './model-session.js';
import { firstNonFinite, normalizeRows } from './output-vectors.js';

/**
 * Embeds a stored image dataset's thumbnails (`<thumbsDir>/<row>.png`, written at ingestion) with
 * a ready model: decode → tensor → batched inference → pooling → checks → optional L2 norm.
 */

export interface EmbedOptions {
  /** onnxruntime intra-op threads of the session this call opens (ignored with `session`). */
  threads: number;
  /** Checked before each batch; an aborted signal ends the call with SELECTION_CANCELLED. */
  signal?: AbortSignal;
  /** Called after each batch with the number of rows embedded so far. */
  onProgress?(done: number): void;
  /**
   * A session from openModelSession for this same model, to reuse across calls (e.g. a job's
   * chunks); the caller releases it. Without it each call opens and releases its own.
   */
  session?: ort.InferenceSession;
}

export const thumbnailPath = (thumbsDir: string, row: number): string => join(thumbsDir, `${row}.png`);

/**
 * Opens a session of a ready model. The file is hashed first: one replaced after start-up was
 * never validated, and results name the model by the hash the registry recorded.
 */
export async function openModelSession(model: ReadyModel, threads: number): Promise<ort.InferenceSession> {
  requireArg(Number.isInteger(threads) && threads >= 1, 'threads', 'an integer ≥ 1', threads);
  const sha256 = await sha256File(model.onnxPath).catch(() => null);
  if (sha256 !== model.sha256) {
    throw new CairnError('MODEL_INVALID', `The file of model '${model.name}' was changed or removed after start-up validation; restart the service to validate it again.`, {
      model: model.name,
    });
  }
  try {
    return await ort.InferenceSession.create(model.onnxPath, sessionOptions(threads));
  } catch (cause) {
    throw new CairnError('MODEL_LOAD_FAILED', `onnxruntime cannot load model '${model.name}'.`, { model: model.name }, { cause });
  }
}

/**
 * Vectors of rows start…start+count−1, row-major (count × output.dim). Batches of
 * `description.batchSize` (or the model's fixed batch, padding the last one); the next batch's
 * thumbnails decode on libuv's pool while the current one runs in onnxruntime.
 *
 * Throws DATASET_NOT_IMAGES for a missing thumbnail, IMAGE_UNDECODABLE for a broken one,
 * EMBEDDING_NON_FINITE (naming the row) for NaN / ±Infinity in a vector, SELECTION_CANCELLED
 * when `signal` is aborted, COMPUTE_BACKEND_FAILED when onnxruntime fails.
 */
export async function embedRows(model: ReadyModel, thumbsDir: string, rows: { start: number; count: number }, opts: EmbedOptions): Promise<Float32Array> {
  const { start, count } = rows;
  requireArg(Number.isInteger(start) && start >= 0, 'rows.start', 'an integer ≥ 0', start);
  requireArg(Number.isInteger(count) && count >= 0, 'rows.count', 'an integer ≥ 0', count);
  const { description } = model;
  const dim = description.output.dim;
  const out = new Float32Array(count * dim);
  checkCancelled(opts.signal);
  if (count === 0) return out;
  const batchSize = model.fixedBatch ?? description.batchSize;
  const session = opts.session ?? (await openModelSession(model, opts.threads));
  const load = (from: number) => loadPixels(thumbsDir, start + from, Math.min(batchSize, count - from), model);
  try {
    let pending: Promise<Uint8Array[]> | null = load(0);
    for (let done = 0; done < count; ) {
      checkCancelled(opts.signal);
      const pixels: Uint8Array[] = await pending!;
      const next = done + pixels.length;
      pending = next < count ? load(next) : null;
      // Awaited on the next turn; this only keeps a rejection unhandled-free if we stop before then.
      pending?.catch(() => undefined);
      const batch = model.fixedBatch ?? pixels.length;
      const vectors = (await inferBatch(session, model, batchTensor(pixels, description.input, batch), batch)).subarray(0, pixels.length * dim);
      const bad = firstNonFinite(vectors);
      if (bad >= 0) {
        const row = start + done + Math.floor(bad / dim);
        throw new CairnError('EMBEDDING_NON_FINITE', `Model '${model.name}' gave ${vectors[bad]} for row ${row}.`, { model: model.name, row });
      }
      if (description.normalize) normalizeRows(vectors, pixels.length, dim);
      out.set(vectors, done * dim);
      done = next;
      opts.onProgress?.(done);
    }
    return out;
  } finally {
    if (!opts.session) await session.release();
  }
}

function checkCancelled(signal: AbortSignal | undefined): void {
  if (signal?.aborted) throw new CairnError('SELECTION_CANCELLED');
}

async function loadPixels(thumbsDir: string, first: number, n: number, model: ReadyModel): Promise<Uint8Array[]> {
  const rows = Array.from({ length: n }, (_, i) => first + i);
  return Promise.all(
    rows.map(async (row) => {
      let bytes: Buffer;
      try {
        bytes = await readFile(thumbnailPath(thumbsDir, row));
      } catch (cause) {
        // Other read errors (EACCES, EIO) are the host's trouble, not the dataset's: rethrown as they are.
        const code = (cause as NodeJS.ErrnoException).code;
        if (code !== 'ENOENT' && code !== 'ENOTDIR') throw cause;
        throw new CairnError('DATASET_NOT_IMAGES', `Row ${row} has no thumbnail; embedding needs an image dataset.`, { row }, { cause });
      }
      try {
        return await decodePixels(bytes, model.description.input);
      } catch (cause) {
        const reason = cause instanceof Error ? cause.message : String(cause);
        throw new CairnError('IMAGE_UNDECODABLE', `The thumbnail of row ${row} cannot be decoded.`, { row, reason }, { cause });
      }
    }),
  );
}

async function inferBatch(session: ort.InferenceSession, model: ReadyModel, input: Float32Array, batch: number): Promise<Float32Array> {
  try {
    return await runBatch(session, model.description, input, batch);
  } catch (err) {
    if (!(err instanceof BatchFailure)) throw err;
    const details = { model: model.name };
    if (err.kind === 'not-float') throw new CairnError('MODEL_OUTPUT_NOT_FLOAT', err.message, details);
    if (err.kind === 'dim') throw new CairnError('MODEL_OUTPUT_DIM_MISMATCH', err.message, details);
    throw new CairnError('COMPUTE_BACKEND_FAILED', `Model '${model.name}': ${err.message}`, details, { cause: err });
  }
}

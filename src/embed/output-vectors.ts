import type { ModelOutput } from './model-description.js';

/**
 * Output tensor → one vector per image, as `output.pooling` defines it (see model-description.ts).
 * Pure: the embedder and the registry's probe share it, so start-up checks exactly what jobs do.
 */

export type PoolResult = { ok: true; vectors: Float32Array; dim: number } | { ok: false; reason: string };

export function poolOutput(data: Float32Array, dims: readonly number[], pooling: ModelOutput['pooling']): PoolResult {
  if (dims.length < 2) return { ok: false, reason: `output has shape [${dims.join(', ')}]; at least [batch, dim] is needed` };
  const batch = dims[0];
  const perImage = dims.slice(1).reduce((a, b) => a * b, 1);
  if (data.length !== batch * perImage) return { ok: false, reason: `output has ${data.length} values for shape [${dims.join(', ')}]` };
  if (pooling === 'flatten' || dims.length === 2) {
    if (pooling === 'none' && dims.length !== 2) return { ok: false, reason: `pooling 'none' needs a [batch, dim] output, got [${dims.join(', ')}]` };
    return { ok: true, vectors: data, dim: perImage };
  }
  if (pooling === 'none') return { ok: false, reason: `pooling 'none' needs a [batch, dim] output, got [${dims.join(', ')}]` };
  // mean over every axis between the batch axis and the last: [batch, positions, dim] row-major.
  const dim = dims[dims.length - 1];
  const positions = perImage / dim;
  const vectors = new Float32Array(batch * dim);
  const acc = new Float64Array(dim);
  for (let b = 0; b < batch; b++) {
    acc.fill(0);
    const base = b * perImage;
    for (let p = 0; p < positions; p++) {
      for (let j = 0; j < dim; j++) acc[j] += data[base + p * dim + j];
    }
    for (let j = 0; j < dim; j++) vectors[b * dim + j] = acc[j] / positions;
  }
  return { ok: true, vectors, dim };
}

/** Index of the first NaN / ±Infinity, or −1. */
export function firstNonFinite(values: Float32Array): number {
  for (let i = 0; i < values.length; i++) if (!Number.isFinite(values[i])) return i;
  return -1;
}

/** Scales each of the `rows` vectors to unit L2 norm in place (float64 sums); zero vectors stay zero. */
export function normalizeRows(vectors: Float32Array, rows: number, dim: number): Float32Array {
  for (let r = 0; r < rows; r++) {
    let sq = 0;
    for (let j = 0; j < dim; j++) sq += vectors[r * dim + j] ** 2;
    if (sq === 0) continue;
    const inv = 1 / Math.sqrt(sq);
    for (let j = 0; j < dim; j++) vectors[r * dim + j] *= inv;
  }
  return vectors;
}

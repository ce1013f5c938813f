import { createHash } from 'node:crypto';
import { mkdir, open, readFile, rename, rm, stat } from 'node:fs/promises';
import { join } from 'node:path';
import { pathExists, tempNameFor, writeFileAtomic } from '../data/file-ops.js';
import type { ModelDescription } from '../embed/model-description.js';

/**
 * Embeddings computed once per (dataset, model file, description, normalization) and shared by
 * every later job: `tenants/<tenant>/embeddings/<datasetId>/<key>/` holds matrix.f32 (rows × dim,
 * float32, row-major) and meta.json once complete, and shards/<start>-<count>.f32 while shard
 * tasks fill it. Every file is written under a temporary name and renamed into place, so a shard
 * or matrix that exists is whole, and two workers computing the same shard cannot corrupt it.
 */
export interface EmbeddingMeta {
  model: string;
  modelSha256: string;
  normalize: boolean;
  rows: number;
  dim: number;
  createdAt: string;
}

export function embeddingCacheKey(modelSha256: string, description: ModelDescription, normalize: boolean): string {
  const what = JSON.stringify({ modelSha256, input: description.input, output: description.output, normalize });
  return createHash('sha256').update(what).digest('hex').slice(0, 32);
}

export class EmbeddingCache {
  constructor(readonly dir: string) {}

  get matrixPath(): string {
    return join(this.dir, 'matrix.f32');
  }

  shardPath(start: number, count: number): string {
    return join(this.dir, 'shards', `${start}-${count}.f32`);
  }

  async meta(): Promise<EmbeddingMeta | null> {
    try {
      return JSON.parse(await readFile(join(this.dir, 'meta.json'), 'utf8')) as EmbeddingMeta;
    } catch {
      return null;
    }
  }

  async hasShard(start: number, count: number): Promise<boolean> {
    return pathExists(this.shardPath(start, count));
  }

  async writeShard(start: number, count: number, vectors: Float32Array): Promise<void> {
    await mkdir(join(this.dir, 'shards'), { recursive: true });
    await writeFileAtomic(this.shardPath(start, count), new Uint8Array(vectors.buffer, vectors.byteOffset, vectors.byteLength));
  }

  /** Joins the shards (in row order) into matrix.f32, records meta.json, then drops the shards. */
  async assemble(shards: Array<{ start: number; count: number }>, meta: EmbeddingMeta): Promise<void> {
    const tmp = tempNameFor(this.matrixPath);
    const out = await open(tmp, 'w');
    try {
      // A shard is at most CAIRN_EMBED_SHARD_ROWS vectors: read whole, appended in row order.
      for (const s of [...shards].sort((a, b) => a.start - b.start)) await out.write(await readFile(this.shardPath(s.start, s.count)));
      await out.close();
      const size = (await stat(tmp)).size;
      if (size !== meta.rows * meta.dim * 4) throw new Error(`embedding shards hold ${size} bytes, expected ${meta.rows * meta.dim * 4}`);
      await rename(tmp, this.matrixPath);
    } catch (err) {
      await out.close().catch(() => undefined);
      await rm(tmp, { force: true });
      throw err;
    }
    await writeFileAtomic(join(this.dir, 'meta.json'), JSON.stringify(meta, null, 2) + '\n');
    await rm(join(this.dir, 'shards'), { recursive: true, force: true });
  }
}

import type { Logger } from 'pino';
import { embedRows, openModelSession } from '../embed/embedder.js';
import { ModelRegistry, type ReadyModel } from '../embed/model-registry.js';
import { CairnError } from '../errors.js';
import { EmbeddingCache, type EmbeddingMeta } from './embedding-cache.js';
import type { ProcessorContext } from './processor.js';
import type { EmbeddingChoice } from './task.js';

/**
 * The model a job was created with, as validated now in this worker: it must still be ready and be
 * the same file (same SHA-256), else the cached embedding and the job would disagree.
 */
export async function modelForJob(modelsDir: string, choice: Pick<EmbeddingChoice, 'model' | 'modelSha256' | 'normalize'>, log?: Logger): Promise<ReadyModel> {
  const quiet = { info: () => undefined, warn: (...a: unknown[]) => log?.warn(a[0] as object, a[1] as string) };
  const registry = await ModelRegistry.load(modelsDir, quiet);
  const model = registry.get(choice.model);
  if (model.sha256 !== choice.modelSha256) {
    throw new CairnError('MODEL_INVALID', `The model file of ${choice.model} changed after the job was created; create the job again.`, { model: choice.model });
  }
  // The job's choice of L2 normalization overrides the description's default.
  return { ...model, description: { ...model.description, normalize: choice.normalize } };
}

/** Embeds rows start..start+count−1 into their shard file, unless it (or the whole matrix) is there already. */
export async function embedShard(
  ctx: Pick<ProcessorContext, 'signal' | 'computeThreads' | 'modelsDir'>,
  cache: EmbeddingCache,
  thumbsDir: string,
  model: ReadyModel,
  range: { start: number; count: number },
  onRows?: (done: number) => void,
): Promise<'computed' | 'cached'> {
  if ((await cache.meta()) || (await cache.hasShard(range.start, range.count))) return 'cached';
  const vectors = await embedRows(model, thumbsDir, range, { threads: ctx.computeThreads || 1, signal: ctx.signal, onProgress: onRows });
  await cache.writeShard(range.start, range.count, vectors);
  return 'computed';
}

/**
 * The whole embedding of a dataset for a job: from the cache when complete; otherwise the shards
 * that the job's shard tasks have not written yet are computed here (in order, one model session),
 * and the matrix is assembled. `onFraction` reports the share of rows embedded.
 */
export async function ensureEmbedding(
  ctx: Pick<ProcessorContext, 'signal' | 'computeThreads' | 'modelsDir'>,
  cache: EmbeddingCache,
  thumbsDir: string,
  choice: EmbeddingChoice,
  rows: number,
  onFraction: (f: number) => void,
): Promise<{ meta: EmbeddingMeta; computedRows: number }> {
  const done = await cache.meta();
  if (done) return { meta: done, computedRows: 0 };
  const model = await modelForJob(ctx.modelsDir, choice);
  let finished = 0;
  let computedRows = 0;
  const session = await openModelSession(model, ctx.computeThreads || 1);
  try {
    for (const shard of choice.shards) {
      if (!(await cache.hasShard(shard.start, shard.count))) {
        const vectors = await embedRows(model, thumbsDir, shard, {
          threads: ctx.computeThreads || 1,
          signal: ctx.signal,
          session,
          onProgress: (n) => onFraction((finished + n) / rows),
        });
        await cache.writeShard(shard.start, shard.count, vectors);
        computedRows += shard.count;
      }
      finished += shard.count;
      onFraction(finished / rows);
    }
  } finally {
    await session.release();
  }
  const meta: EmbeddingMeta = { model: choice.model, modelSha256: choice.modelSha256, normalize: choice.normalize, rows, dim: model.description.output.dim, createdAt: new Date().toISOString() };
  await cache.assemble(choice.shards, meta);
  return { meta, computedRows };
}

import { join } from 'node:path';
import { EmbeddingCache } from './embedding-cache.js';
import { embedShard, modelForJob } from './embedding-step.js';
import type { ProcessorContext } from './processor.js';
import type { EmbedSpec } from './task.js';

/**
 * One shard of a job's embedding: a child task that any worker (or embedded thread) can run, so
 * N workers share one dataset's embedding. Its parent selection joins the shards, and embeds
 * itself any shard that is missing (a failed or cancelled child).
 */
export async function embedProcessor(ctx: ProcessorContext): Promise<void> {
  const { store, ref } = ctx;
  const spec = await store.readSpec<EmbedSpec>(ref);
  // Cancelling the parent job stops its shards too.
  if (await store.cancelRequested({ kind: 'job', tenant: ref.tenant, id: spec.parentJobId })) await store.requestCancel(ref);
  const cache = new EmbeddingCache(join(store.embeddingsDir(ref.tenant, spec.datasetId), spec.embedding.cacheKey));
  const thumbs = join(store.storeDir(ref.tenant), spec.datasetId, 'thumbs');
  const model = await modelForJob(ctx.modelsDir, spec.embedding);
  await embedShard(ctx, cache, thumbs, model, { start: spec.start, count: spec.count }, (done) => ctx.onProgress({ phase: 'embed', fraction: done / spec.count }));
  ctx.onProgress({ phase: 'embed', fraction: 1 });
}

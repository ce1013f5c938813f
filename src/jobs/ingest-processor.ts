import { ingestFile, openDataset } from '../data/dataset-store.js';
import { defaultReadOptions } from '../data/read-options.js';
import type { ProcessorContext } from './processor.js';
import type { IngestSpec } from './task.js';

/**
 * Ingests an uploaded file (the task folder's `source`) into the tenant's dataset store under the
 * task's id, then deletes the upload: after success only the stored dataset remains.
 */
export async function ingestProcessor(ctx: ProcessorContext): Promise<void> {
  const { store, ref } = ctx;
  const spec = await store.readSpec<IngestSpec>(ref);
  // An earlier attempt may have stored the dataset and died before recording it: stored datasets
  // appear whole (renamed into place when complete), so one that opens is finished.
  try {
    openDataset(store.storeDir(ref.tenant), ref.id);
    await store.removeFile(ref, 'source');
    ctx.onProgress({ phase: 'ingest', fraction: 1 });
    return;
  } catch {
    // Not stored yet: ingest it.
  }
  const total = Math.max(spec.sourceBytes, 1);
  let lastReport = 0;
  await ingestFile(store.file(ref, 'source'), {
    storeDir: store.storeDir(ref.tenant),
    datasetId: ref.id,
    format: spec.format,
    sourceName: spec.sourceName,
    options: defaultReadOptions({
      ...spec.read,
      signal: ctx.signal,
      onProgress: ({ bytesRead }) => {
        const now = Date.now();
        if (now - lastReport < 200) return;
        lastReport = now;
        ctx.onProgress({ phase: 'ingest', fraction: Math.min(bytesRead / total, 0.99) });
      },
    }),
  });
  await store.removeFile(ref, 'source');
  ctx.onProgress({ phase: 'ingest', fraction: 1 });
}

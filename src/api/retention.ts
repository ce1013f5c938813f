import type { Logger } from 'pino';
import { deleteDataset } from '../data/dataset-store.js';
import { rm } from 'node:fs/promises';
import { removeJob } from '../jobs/job-files.js';
import type { TaskStore } from '../jobs/task-store.js';
import { isFinal } from '../jobs/task.js';
import type { IdempotencyStore } from './idempotency.js';

/**
 * Deletes what is older than the retention period: finished jobs (by finish time) and datasets
 * (by upload time) that no unfinished job uses, with everything stored for them. Uploaded data is
 * never kept longer than this, whatever clients do.
 */
export async function applyRetention(store: TaskStore, idempotency: IdempotencyStore, retentionHours: number, log: Logger, now = Date.now()): Promise<number> {
  await idempotency.sweep(now);
  if (retentionHours <= 0) return 0;
  const cutoff = now - retentionHours * 3600 * 1000;
  let removed = 0;
  for (const tenant of await store.tenants()) {
    const inUse = new Set<string>();
    for (const id of await store.list(tenant, 'job')) {
      const ref = { kind: 'job' as const, tenant, id };
      try {
        const [state, spec] = await Promise.all([store.readState(ref), store.readSpec(ref)]);
        if (!isFinal(state.status)) {
          if (spec.kind === 'job') inUse.add(spec.datasetId);
          continue;
        }
        if (Date.parse(state.finishedAt ?? spec.createdAt) < cutoff) {
          await removeJob(store, ref);
          removed++;
        }
      } catch {
        // Deleted meanwhile.
      }
    }
    for (const id of await store.list(tenant, 'dataset')) {
      const ref = { kind: 'dataset' as const, tenant, id };
      try {
        const [state, spec] = await Promise.all([store.readState(ref), store.readSpec(ref)]);
        if (inUse.has(id) || !isFinal(state.status) || Date.parse(spec.createdAt) >= cutoff) continue;
        await store.remove(ref);
        await deleteDataset(store.storeDir(tenant), id).catch(() => undefined);
        await rm(store.embeddingsDir(tenant, id), { recursive: true, force: true });
        removed++;
      } catch {
        // Deleted meanwhile.
      }
    }
  }
  if (removed) log.info({ removed, retentionHours }, 'retention: deleted old datasets and jobs');
  return removed;
}

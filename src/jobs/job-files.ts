import type { TaskStore } from './task-store.js';
import type { SelectSpec, TaskRef } from './task.js';

/** Removes a selection job's folder and its embedding shard tasks (the cached embedding stays for later jobs). */
export async function removeJob(store: TaskStore, ref: TaskRef): Promise<void> {
  const spec = await store.readSpec<SelectSpec>(ref).catch(() => null);
  await store.remove(ref);
  for (const sh of spec?.embedding?.shards ?? []) await store.remove({ kind: 'embed', tenant: ref.tenant, id: sh.id }).catch(() => undefined);
}

/** Row ranges of at most `size` rows covering 0..rows−1. */
export function shardRanges(rows: number, size: number): Array<{ start: number; count: number }> {
  const out: Array<{ start: number; count: number }> = [];
  for (let start = 0; start < rows; start += size) out.push({ start, count: Math.min(size, rows - start) });
  return out;
}

import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { runAttempt } from '../../src/jobs/task-runner.js';
import { TaskStore } from '../../src/jobs/task-store.js';
import { clusterMatrix, createIngest, createSelect, npyOf } from './task-fixtures.js';

describe('task runner', () => {
  const dir = mkdtempSync(join(tmpdir(), 'cairn-runner-test-'));
  const store = new TaskStore(dir);
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  const attempt = (ref: Parameters<typeof runAttempt>[0]['ref'], n = 1) => runAttempt({ store, ref, attempt: n, maxAttempts: 3, computeThreads: 1, checkpointEveryMs: 1000 });

  it('an ingestion whose dataset an earlier attempt stored before dying completes without storing it twice', async () => {
    const bytes = npyOf(clusterMatrix(50, 1));
    const ref = await createIngest(store, 'acme', bytes);
    expect((await attempt(ref)).outcome).toBe('completed');
    // As if the worker died after the rename, before writing its final state.
    const state = await store.readState(ref);
    await store.writeState(ref, { ...state, status: 'running', finishedAt: null });
    writeFileSync(store.file(ref, 'source'), bytes);
    const again = await attempt(ref, 2);
    expect(again).toEqual({ outcome: 'completed', error: null });
    expect(await store.readOptional(ref, 'source')).toBeNull();
  });

  it('a deleted task is reported gone, and a finished one is not run again', async () => {
    const ref = await createIngest(store, 'acme', npyOf(clusterMatrix(20, 2)));
    expect((await attempt(ref)).outcome).toBe('completed');
    expect((await attempt(ref, 2)).outcome).toBe('completed');
    await store.remove(ref);
    expect((await attempt(ref, 3)).outcome).toBe('gone');
  });

  it('a selection whose rows exceed the memory budget reads them from the file and gives a result as good', async () => {
    const ingest = await createIngest(store, 'acme', npyOf(clusterMatrix(3000, 4)));
    expect((await attempt(ingest)).outcome).toBe('completed');
    const results = [];
    for (const memoryBudgetBytes of [undefined, 1]) {
      const ref = await createSelect(store, 'acme', ingest.id, { k: 6, seed: 2, maxIterations: 200 });
      const r = await runAttempt({ store, ref, attempt: 1, maxAttempts: 3, computeThreads: 1, checkpointEveryMs: 1000, memoryBudgetBytes });
      expect(r.outcome).toBe('completed');
      expect(await store.readOptional(ref, 'assignments.bin')).not.toBeNull();
      results.push(JSON.parse((await store.readOptional(ref, 'result.json'))!) as { discrepancy: { value: number }; representatives: unknown[] });
    }
    const [inMemory, fromFile] = results;
    expect(fromFile.representatives).toHaveLength(6);
    // Only the descent's minibatches differ (row blocks instead of a shuffled copy): D² within 5%.
    expect(Math.abs(fromFile.discrepancy.value - inMemory.discrepancy.value) / inMemory.discrepancy.value).toBeLessThan(0.05);
  });

  it('a cancel marker written before the start cancels without running', async () => {
    const ref = await createIngest(store, 'acme', npyOf(clusterMatrix(20, 3)));
    await store.requestCancel(ref);
    const r = await attempt(ref);
    expect(r.outcome).toBe('cancelled');
    expect(r.error?.code).toBe('DATASET_INGEST_CANCELLED');
    expect((await store.readState(ref)).status).toBe('cancelled');
  });
});

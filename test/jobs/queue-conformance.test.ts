import { mkdtempSync, readFileSync, rmSync, truncateSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { TaskStore } from '../../src/jobs/task-store.js';
import { isFinal, type TaskState } from '../../src/jobs/task.js';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { queueFactories, type QueueHarness } from '../helpers/queues.js';
import { clusterMatrix, createIngest, createSelect, npyOf, waitFor } from './task-fixtures.js';

/**
 * The one suite every queue adapter passes (embedded; BullMQ against a real Redis): tasks run to
 * completion with progress, bad data fails without retries, transient failures are retried,
 * cancellation works for waiting and running tasks, and a stopped queue's work resumes.
 */
describe.each(queueFactories())('queue conformance: $name', (factory) => {
  let dir: string;
  let store: TaskStore;
  let h: QueueHarness;
  const tenant = 'acme';
  let datasetId: string;
  const data = clusterMatrix(4000, 3);

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'cairn-queue-test-'));
    store = new TaskStore(dir);
    h = await factory.create(store, { maxAttempts: 2, backoffMs: 200, checkpointEveryMs: 100 });
    const ds = await createIngest(store, tenant, npyOf(data));
    await h.queue.enqueue(ds);
    const s = await waitFor(store, h.queue, ds);
    expect(s.status).toBe('completed');
    datasetId = ds.id;
  }, 120_000);

  afterAll(async () => {
    await h?.close();
    rmSync(dir, { recursive: true, force: true });
  });

  it('runs an ingestion: the stored dataset appears and the upload is gone', async () => {
    const meta = JSON.parse(readFileSync(join(store.storeDir(tenant), datasetId, 'meta.json'), 'utf8'));
    expect([meta.rows, meta.cols]).toEqual([data.rows, data.cols]);
    expect(await store.readOptional({ kind: 'dataset', tenant, id: datasetId }, 'source')).toBeNull();
  });

  it('runs a selection with progress events through to a result and assignments', async () => {
    const ref = await createSelect(store, tenant, datasetId, { k: 8, seed: 1, maxIterations: 300 });
    const seen: TaskState[] = [];
    let sawFinal: () => void = () => undefined;
    const finalEvent = new Promise<void>((resolve) => (sawFinal = resolve));
    const off = h.queue.subscribe((e) => {
      if (e.ref.id !== ref.id) return;
      seen.push(e.state);
      if (isFinal(e.state.status)) sawFinal();
    });
    await h.queue.enqueue(ref);
    const final = await waitFor(store, h.queue, ref);
    // waitFor may see the end in state.json before the queue's event arrives (BullMQ relays it
    // through Redis): the final event must still come, and be the last one.
    await Promise.race([finalEvent, new Promise((resolve) => setTimeout(resolve, 10_000))]);
    off();
    expect(final.status).toBe('completed');
    expect(final.attempt).toBe(1);
    expect(seen.some((s) => s.status === 'running' && s.progress.phase === 'descent')).toBe(true);
    expect(seen.at(-1)!.status).toBe('completed');
    const result = JSON.parse((await store.readOptional(ref, 'result.json'))!) as ResultDocument;
    expect(result.representatives).toHaveLength(8);
    const assignments = readFileSync(store.file(ref, 'assignments.bin'));
    expect(assignments.length).toBe(data.rows * 8);
  }, 120_000);

  it('runs a task’s children first: it starts only once every child has finished, even a failed one', async () => {
    const a = await createSelect(store, tenant, datasetId, { k: 3, seed: 1, maxIterations: 300 });
    const bad = await createSelect(store, tenant, 'no-such-dataset', { k: 3 });
    const parent = await createSelect(store, tenant, datasetId, { k: 2, maxIterations: 50 });
    await h.queue.enqueue(parent, [a, bad]);
    const p = await waitFor(store, h.queue, parent);
    expect(p.status).toBe('completed');
    const [sa, sb] = await Promise.all([store.readState(a), store.readState(bad)]);
    expect(sa.status).toBe('completed');
    expect(sb.status).toBe('failed');
    expect(sb.error?.code).toBe('DATASET_NOT_FOUND');
    expect(Date.parse(p.startedAt!)).toBeGreaterThanOrEqual(Date.parse(sa.finishedAt!));
    expect(Date.parse(p.startedAt!)).toBeGreaterThanOrEqual(Date.parse(sb.finishedAt!));
  }, 60_000);

  it('fails a task with bad data at once, without retries, with the catalogued code', async () => {
    const bad = await createIngest(store, tenant, Buffer.from('not an npy file at all'), 'broken.npy');
    await h.queue.enqueue(bad);
    const s = await waitFor(store, h.queue, bad);
    expect(s.status).toBe('failed');
    expect(s.attempt).toBe(1);
    expect(s.error?.code).toBe('NPY_BAD_MAGIC');
  }, 60_000);

  it('retries a transient failure and succeeds once the cause is gone', async () => {
    // A damaged stored matrix is a server-side fault (5xx), so it is retried.
    const ds = await createIngest(store, tenant, npyOf(clusterMatrix(500, 9)));
    await h.queue.enqueue(ds);
    expect((await waitFor(store, h.queue, ds)).status).toBe('completed');
    const matrixFile = join(store.storeDir(tenant), ds.id, 'matrix.f32');
    const good = readFileSync(matrixFile);
    truncateSync(matrixFile, 100);
    const ref = await createSelect(store, tenant, ds.id, { k: 4, seed: 2, maxIterations: 100 });
    await h.queue.enqueue(ref);
    const retrying = await waitFor(store, h.queue, ref, (s) => s.status === 'queued' && s.error !== null);
    expect(retrying.error?.code).toBe('DATASET_STORE_CORRUPT');
    writeFileSync(matrixFile, good);
    const s = await waitFor(store, h.queue, ref);
    expect(s.status).toBe('completed');
    expect(s.attempt).toBe(2);
  }, 60_000);

  it('fails a task after its last attempt of a transient failure', async () => {
    const ds = await createIngest(store, tenant, npyOf(clusterMatrix(300, 4)));
    await h.queue.enqueue(ds);
    await waitFor(store, h.queue, ds);
    truncateSync(join(store.storeDir(tenant), ds.id, 'matrix.f32'), 100);
    const ref = await createSelect(store, tenant, ds.id, { k: 3, maxIterations: 50 });
    await h.queue.enqueue(ref);
    const s = await waitFor(store, h.queue, ref);
    expect(s.status).toBe('failed');
    expect(s.attempt).toBe(2);
    expect(s.error?.code).toBe('DATASET_STORE_CORRUPT');
  }, 60_000);

  it('cancels a running selection within seconds', async () => {
    const ref = await createSelect(store, tenant, datasetId, { k: 8, maxIterations: 1_000_000, plateauTolerance: 0 });
    await h.queue.enqueue(ref);
    await waitFor(store, h.queue, ref, (s) => s.status === 'running' && s.progress.phase === 'descent');
    const asked = Date.now();
    await store.requestCancel(ref);
    await h.queue.cancel(ref);
    const s = await waitFor(store, h.queue, ref);
    expect(s.status).toBe('cancelled');
    expect(s.error?.code).toBe('SELECTION_CANCELLED');
    expect(Date.now() - asked).toBeLessThan(5000);
  }, 60_000);

  it('cancels a waiting task before it starts', async () => {
    const blocker = await createSelect(store, tenant, datasetId, { k: 8, maxIterations: 1_000_000, plateauTolerance: 0 });
    const waiting = await createSelect(store, tenant, datasetId, { k: 3, maxIterations: 50 });
    await h.queue.enqueue(blocker);
    await waitFor(store, h.queue, blocker, (s) => s.status === 'running');
    await h.queue.enqueue(waiting);
    await store.requestCancel(waiting);
    await h.queue.cancel(waiting);
    const s = await waitFor(store, h.queue, waiting);
    expect(s.status).toBe('cancelled');
    expect(s.startedAt).toBeNull();
    await store.requestCancel(blocker);
    await h.queue.cancel(blocker);
    expect((await waitFor(store, h.queue, blocker)).status).toBe('cancelled');
  }, 60_000);

  it('counts waiting and running tasks', async () => {
    const a = await createSelect(store, tenant, datasetId, { k: 8, maxIterations: 1_000_000, plateauTolerance: 0 });
    const b = await createSelect(store, tenant, datasetId, { k: 3, maxIterations: 50 });
    await h.queue.enqueue(a);
    await waitFor(store, h.queue, a, (s) => s.status === 'running');
    await h.queue.enqueue(b);
    const c = await h.queue.counts();
    expect(c.active).toBe(1);
    expect(c.waiting).toBeGreaterThanOrEqual(1);
    for (const r of [a, b]) {
      await store.requestCancel(r);
      await h.queue.cancel(r);
      await waitFor(store, h.queue, r);
    }
  }, 60_000);

  it('a selection stopped by a shutdown resumes after the restart and gives the uninterrupted result', async () => {
    const options = { k: 6, seed: 11, maxIterations: 1500, plateauTolerance: 0 };
    const straight = await createSelect(store, tenant, datasetId, options);
    await h.queue.enqueue(straight);
    expect((await waitFor(store, h.queue, straight)).status).toBe('completed');

    const ref = await createSelect(store, tenant, datasetId, options);
    await h.queue.enqueue(ref);
    await waitFor(store, h.queue, ref, (s) => s.status === 'running' && (s.progress.iteration ?? 0) > 200);
    const queue = await h.restart(0);
    const s = await waitFor(store, queue, ref, undefined, 120_000);
    expect(s.status).toBe('completed');
    const a = JSON.parse((await store.readOptional(straight, 'result.json'))!) as ResultDocument;
    const b = JSON.parse((await store.readOptional(ref, 'result.json'))!) as ResultDocument;
    expect(b.representatives.map((r) => r.id)).toEqual(a.representatives.map((r) => r.id));
    expect(b.discrepancy.value).toBeCloseTo(a.discrepancy.value, 12);
  }, 180_000);
});

import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { threadId } from 'node:worker_threads';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createBackend } from '../../src/compute/create-backend.js';
import { Rng } from '../../src/core/random.js';
import { localPasses, PASS_BLOCK_ROWS } from '../../src/core/row-passes.js';
import { parseSpace, prepareSpace } from '../../src/core/space.js';
import { openDataset } from '../../src/data/dataset-store.js';
import { shardedPasses, type PassRecord } from '../../src/jobs/pass-shards.js';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { runAttempt } from '../../src/jobs/task-runner.js';
import { TaskStore } from '../../src/jobs/task-store.js';
import type { SelectSpec, TaskRef } from '../../src/jobs/task.js';
import { EmbeddedQueue } from '../../src/jobs/embedded-queue.js';
import { redisAnswers, testLog, testRedisUrl } from '../helpers/queues.js';
import { clusters, createIngest, createSelect, npyOf, waitFor } from './task-fixtures.js';
import { processGroup, useWorkerPair } from './worker-processes.js';

/**
 * The same job run alone in this process (one worker, no shards: no queue to hand them to): its
 * result and assignments must equal, bit for bit, those of the job whose passes were shared.
 */
async function expectSingleWorkerResult(store: TaskStore, shared: TaskRef, options: SelectSpec['options']): Promise<void> {
  const spec = await store.readSpec<SelectSpec>(shared);
  const single = await createSelect(store, shared.tenant, spec.datasetId, options);
  const alone = await runAttempt({ store, ref: single, attempt: 1, maxAttempts: 1, computeThreads: 1, checkpointEveryMs: 60_000, passShardRows: 0 });
  expect(alone.outcome).toBe('completed');
  expect(await store.readOptional(single, 'passes.json')).toBeNull();
  const a = JSON.parse((await store.readOptional(single, 'result.json'))!) as ResultDocument;
  const b = JSON.parse((await store.readOptional(shared, 'result.json'))!) as ResultDocument;
  expect(b.coverage).toEqual(a.coverage);
  expect(b.representatives).toEqual(a.representatives);
  expect(b.discrepancy).toEqual(a.discrepancy);
  expect(readFileSync(store.file(shared, 'assignments.bin')).equals(readFileSync(store.file(single, 'assignments.bin')))).toBe(true);
  expect(await store.list(shared.tenant, 'pass')).toEqual([]);
}

/** Each pass of the job, split in `shards` shards. */
function passRecords(store: TaskStore, ref: TaskRef, shards: number): PassRecord[] {
  const records = JSON.parse(readFileSync(store.file(ref, 'passes.json'), 'utf8')) as PassRecord[];
  expect(records.map((r) => r.op)).toEqual(['nearest', 'assign']);
  for (const r of records) expect(r.shards).toHaveLength(shards);
  return records;
}

/**
 * One selection shared by two BullMQ worker processes: its snapping and coverage passes split into
 * shards of two blocks, which the job and the shard tasks on both workers compute. The merged
 * statistics must be those of the same job run by a single worker with no shards, bit for bit.
 */
const redisUrl = testRedisUrl();
const redisUp = await redisAnswers(redisUrl);
// Under CI, Redis is part of the machine (.ci/run starts it): a missing Redis fails there instead of skipping.
const suite = redisUp || process.env.CI ? describe : describe.skip;
const title = redisUp ? 'full passes shared by two worker processes' : `full passes shared by two worker processes (skipped: Redis at ${redisUrl} does not answer)`;

// 16 blocks of rows in shards of 2; k and the dimension make a shard take tens of milliseconds.
const ROWS = 16 * PASS_BLOCK_ROWS;
const SHARD_ROWS = 2 * PASS_BLOCK_ROWS;
const options: SelectSpec['options'] = { k: 192, seed: 9, maxIterations: 300 };

suite(title, () => {
  const pair = useWorkerPair(redisUrl, 1, { CAIRN_PASS_SHARD_ROWS: String(SHARD_ROWS) });
  const tenant = 'acme';

  it('merges shards computed in both processes into the single-worker result', async () => {
    const { store, queue } = pair;
    const ds = await createIngest(store, tenant, npyOf(clusters(ROWS, 64, 4)));
    await queue.enqueue(ds);
    expect((await waitFor(store, queue, ds)).status).toBe('completed');

    const shared = await createSelect(store, tenant, ds.id, options);
    await queue.enqueue(shared);
    const state = await waitFor(store, queue, shared, undefined, 300_000);
    expect(state.status, JSON.stringify(state.error)).toBe('completed');

    const shards = passRecords(store, shared, ROWS / SHARD_ROWS).flatMap((r) => r.shards);
    const jobPid = state.runner!.pid;
    const jobGroup = processGroup(jobPid);
    const groups = new Set(shards.map((s) => processGroup(s.pid)));
    testLog.warn({ byJob: shards.filter((s) => s.pid === jobPid).length, byOthers: shards.filter((s) => s.pid !== jobPid).length, groups: [...groups] }, 'pass shards');
    // Some shards were computed outside the job's process, and by the other worker process.
    expect(shards.some((s) => s.pid !== jobPid)).toBe(true);
    expect([...groups].some((g) => g !== null && g !== jobGroup)).toBe(true);
    await expectSingleWorkerResult(store, shared, options);
  }, 600_000);
});

describe("full passes shared by the embedded queue's threads", () => {
  let dir: string;
  let store: TaskStore;
  let queue: EmbeddedQueue;
  let datasetId: string;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'cairn-shards-embedded-'));
    store = new TaskStore(dir);
    queue = new EmbeddedQueue({ store, concurrency: 2, maxAttempts: 1, computeThreads: 1, checkpointEveryMs: 60_000, passShardRows: SHARD_ROWS, log: testLog });
    await queue.start();
    const ds = await createIngest(store, 'acme', npyOf(clusters(ROWS, 64, 4)));
    await queue.enqueue(ds);
    expect((await waitFor(store, queue, ds)).status).toBe('completed');
    datasetId = ds.id;
  }, 120_000);

  afterAll(async () => {
    await queue?.close(0);
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  it('a job whose passes the queue shares returns the single-worker result', async () => {
    const shared = await createSelect(store, 'acme', datasetId, options);
    await queue.enqueue(shared);
    const state = await waitFor(store, queue, shared, undefined, 300_000);
    expect(state.status, JSON.stringify(state.error)).toBe('completed');
    const shards = passRecords(store, shared, ROWS / SHARD_ROWS).flatMap((r) => r.shards);
    expect(new Set(shards.map((s) => s.pid))).toEqual(new Set([process.pid]));
    // How many shards the other thread took depends on timing (a thread starts in a few hundred ms;
    // a pass here takes about as long): the next test makes sure it takes some.
    const threads: Record<number, number> = {};
    for (const s of shards) threads[s.thread] = (threads[s.thread] ?? 0) + 1;
    testLog.warn({ shardsByThread: threads }, 'pass shards');
    await expectSingleWorkerResult(store, shared, options);
  }, 600_000);

  it("the queue's other threads compute the shards of a slow job, exactly", async () => {
    const parent = await createSelect(store, 'acme', datasetId, options);
    const rows = openDataset(store.storeDir('acme'), datasetId).rowSource();
    const backend = await createBackend('onnx', { threads: 1 });
    try {
      const space = await prepareSpace(rows, parseSpace('raw'), backend, new Rng(1));
      // This job's own share is slow (every block waits 300 ms), so the threads that start meanwhile take shards.
      const slow = new Proxy(backend, {
        get(target, key, receiver) {
          const value = Reflect.get(target, key, receiver) as unknown;
          if (key !== 'assign' && key !== 'nearestRows') return typeof value === 'function' ? value.bind(target) : value;
          return async (...args: unknown[]) => {
            await new Promise((r) => setTimeout(r, 300));
            return (value as (...a: unknown[]) => unknown).apply(target, args);
          };
        },
      });
      const records: PassRecord[] = [];
      const passes = shardedPasses({
        store,
        parent,
        source: { kind: 'dataset', datasetId },
        recipe: space.recipe,
        shardRows: SHARD_ROWS,
        spawn: async (refs) => refs.forEach((r) => void queue.enqueue(r)),
        withdraw: async (refs) => refs.forEach((r) => void queue.cancel(r)),
        signal: new AbortController().signal,
        onPass: (r) => records.push(r),
      });
      const points = space.rows.gather([3, 77_000, 150_001, ROWS - 9]);
      const kernel = { kind: 'energy', a: 1 } as const;
      const near = await passes.nearest(space.rows, slow, points, 4, 10);
      const assign = await passes.assign(space.rows, slow, kernel, points, 4);
      const nearLocal = await localPasses.nearest(space.rows, backend, points, 4, 10);
      const assignLocal = await localPasses.assign(space.rows, backend, kernel, points, 4);
      expect(Array.from(near.index)).toEqual(Array.from(nearLocal.index));
      expect(Array.from(near.sqDist)).toEqual(Array.from(nearLocal.sqDist));
      expect(Array.from(assign.assignment)).toEqual(Array.from(assignLocal.assignment));
      expect(Array.from(assign.distance)).toEqual(Array.from(assignLocal.distance));
      expect(Array.from(assign.hSum)).toEqual(Array.from(assignLocal.hSum));
      for (const r of records) {
        expect(r.shards).toHaveLength(ROWS / SHARD_ROWS);
        expect(r.shards.some((s) => s.pid === process.pid && s.thread !== threadId)).toBe(true);
      }
    } finally {
      await backend.dispose();
    }
  }, 300_000);
});

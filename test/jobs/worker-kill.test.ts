import { describe, expect, it } from 'vitest';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import type { SelectSpec, TaskState } from '../../src/jobs/task.js';
import { redisAnswers, testLog, testRedisUrl } from '../helpers/queues.js';
import { clusters, createIngest, createSelect, npyOf, waitFor } from './task-fixtures.js';
import { processGroup, useWorkerPair } from './worker-processes.js';

/**
 * A worker killed outright (SIGKILL to its whole process group: the worker and its sandbox child)
 * in the middle of a selection: another worker process takes the job over once its lock expires,
 * resumes it from the last checkpoint, and the result is the one an uninterrupted run gives.
 */
const redisUrl = testRedisUrl();
const redisUp = await redisAnswers(redisUrl);
// Under CI, Redis is part of the machine (.ci/run starts it): a missing Redis fails there instead of skipping.
const suite = redisUp || process.env.CI ? describe : describe.skip;
const title = redisUp ? 'a killed BullMQ worker process' : `a killed BullMQ worker process (skipped: Redis at ${redisUrl} does not answer)`;

const options: SelectSpec['options'] = { k: 32, seed: 5, maxIterations: 32_000, plateauTolerance: 0 };

suite(title, () => {
  const pair = useWorkerPair(redisUrl, 2, { CAIRN_CHECKPOINT_SECONDS: '0.5', CAIRN_STALLED_SECONDS: '2' });
  const tenant = 'acme';

  it('another worker resumes the job from its checkpoint and gives the uninterrupted result', async () => {
    const { store, queue, workers } = pair;
    const ds = await createIngest(store, tenant, npyOf(clusters(20_000, 16, 8)));
    await queue.enqueue(ds);
    expect((await waitFor(store, queue, ds)).status).toBe('completed');

    const t0 = Date.now();
    const straight = await createSelect(store, tenant, ds.id, options);
    await queue.enqueue(straight);
    const straightState = await waitFor(store, queue, straight, undefined, 180_000);
    expect(straightState.status).toBe('completed');
    const straightSeconds = (Date.now() - t0) / 1000;

    const ref = await createSelect(store, tenant, ds.id, options);
    await queue.enqueue(ref);
    // A third of the way in: several checkpoints (every 500 ms) are behind it.
    const running = await waitFor(store, queue, ref, (s) => s.status === 'running' && (s.progress.iteration ?? 0) > options.maxIterations! / 3, 180_000);
    const victimPid = running.runner!.pid;
    const victim = workers.find((w) => w.pgid === processGroup(victimPid));
    expect(victim, `runner ${victimPid} belongs to neither worker's process group`).toBeDefined();
    const t1 = Date.now();
    process.kill(-victim!.pgid, 'SIGKILL');
    await victim!.exited;

    const resumed = await waitFor(store, queue, ref, (s) => s.status === 'running' && s.runner?.pid !== victimPid, 60_000);
    const takeoverSeconds = (Date.now() - t1) / 1000;
    const survivor = workers.find((w) => w !== victim)!;
    expect(processGroup(resumed.runner!.pid)).toBe(survivor.pgid);
    // The same attempt goes on: a stalled job has not failed.
    expect(resumed.attempt).toBe(running.attempt);

    const final: TaskState = await waitFor(store, queue, ref, undefined, 180_000);
    expect(final.status).toBe('completed');
    expect(final.runner!.pid).not.toBe(victimPid);

    const a = JSON.parse((await store.readOptional(straight, 'result.json'))!) as ResultDocument;
    const b = JSON.parse((await store.readOptional(ref, 'result.json'))!) as ResultDocument;
    const relative = Math.abs(b.discrepancy.value - a.discrepancy.value) / Math.abs(a.discrepancy.value);
    testLog.warn({ straightSeconds, takeoverSeconds, straightD2: a.discrepancy.value, resumedD2: b.discrepancy.value, relative }, 'worker kill test');
    expect(relative).toBeLessThan(0.01);
  }, 600_000);
});

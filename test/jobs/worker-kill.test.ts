import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import { BullQueue } from '../../src/jobs/bullmq-queue.js';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { TaskStore } from '../../src/jobs/task-store.js';
import type { SelectSpec, TaskState } from '../../src/jobs/task.js';
import { deleteKeys, redisAnswers, testLog, testRedisUrl, uniquePrefix } from '../helpers/queues.js';
import { createIngest, createSelect, npyOf, waitFor } from './task-fixtures.js';

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

const repoRoot = fileURLToPath(new URL('../..', import.meta.url));
const options: SelectSpec['options'] = { k: 32, seed: 5, maxIterations: 32_000, plateauTolerance: 0 };

interface WorkerProcess {
  child: ChildProcess;
  /** Its process group: detached, so the worker and its sandbox children share a group of their own. */
  pgid: number;
  exited: Promise<void>;
}

/** Eight clusters in 16-D. */
function clusters16(rows: number, seed: number): { matrix: Float32Array; rows: number; cols: number } {
  const cols = 16;
  const rng = new Rng(seed);
  const matrix = new Float32Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let t = 0; t < cols; t++) matrix[i * cols + t] = (t % 8 === i % 8 ? 4 : 0) + rng.normal();
  return { matrix, rows, cols };
}

/** The process group of a live process (field 5 of /proc/<pid>/stat, counted after the parenthesised name). */
function processGroup(pid: number): number | null {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    return Number(stat.slice(stat.lastIndexOf(')') + 2).split(' ')[2]);
  } catch {
    return null;
  }
}

suite(title, () => {
  let dir: string;
  let store: TaskStore;
  let queue: BullQueue;
  const prefix = uniquePrefix();
  const workers: WorkerProcess[] = [];
  const tenant = 'acme';

  const startWorker = (): Promise<WorkerProcess> =>
    new Promise((resolve, reject) => {
      const child = spawn(process.execPath, ['--import', 'tsx', 'test/jobs/worker-process.ts'], {
        cwd: repoRoot,
        detached: true,
        stdio: ['ignore', 'pipe', 'inherit'],
        env: {
          ...process.env,
          REDIS_URL: redisUrl,
          CAIRN_QUEUE_PREFIX: prefix,
          CAIRN_DATA_DIR: dir,
          CAIRN_WORKER_CONCURRENCY: '1',
          CAIRN_COMPUTE_THREADS: '1',
          CAIRN_CHECKPOINT_SECONDS: '0.5',
          CAIRN_STALLED_SECONDS: '2',
          CAIRN_JOB_ATTEMPTS: '2',
          LOG_LEVEL: process.env.TEST_LOG_LEVEL ?? 'warn',
        },
      });
      const exited = new Promise<void>((res) => child.once('exit', () => res()));
      let out = '';
      child.stdout!.on('data', (chunk: Buffer) => {
        out += chunk.toString();
        if (out.includes('ready\n')) resolve({ child, pgid: child.pid!, exited });
        // Pass the worker's own output through, for a failing run's log.
        process.stdout.write(chunk);
      });
      child.once('exit', (code) => reject(new Error(`worker process exited early with code ${code}`)));
    });

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'cairn-kill-test-'));
    store = new TaskStore(dir);
    queue = await BullQueue.create({ redisUrl, prefix, store, maxAttempts: 2, backoffMs: 200, log: testLog });
    workers.push(...(await Promise.all([startWorker(), startWorker()])));
  }, 60_000);

  afterAll(async () => {
    for (const w of workers) {
      if (w.child.exitCode !== null || w.child.signalCode !== null) continue;
      try {
        process.kill(-w.pgid, 'SIGTERM');
      } catch {
        // Gone meanwhile.
      }
      const stopped = await Promise.race([w.exited.then(() => true), new Promise<boolean>((res) => setTimeout(() => res(false), 10_000))]);
      // The group too: a sandbox child must not outlive the test.
      try {
        process.kill(-w.pgid, 'SIGKILL');
      } catch {
        // Already empty.
      }
      if (!stopped) await w.exited;
    }
    await queue?.close(0);
    await deleteKeys(redisUrl, prefix);
    rmSync(dir, { recursive: true, force: true });
  }, 60_000);

  it('another worker resumes the job from its checkpoint and gives the uninterrupted result', async () => {
    const ds = await createIngest(store, tenant, npyOf(clusters16(20_000, 8)));
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

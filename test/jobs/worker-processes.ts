import { spawn, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll } from 'vitest';
import { BullQueue } from '../../src/jobs/bullmq-queue.js';
import { TaskStore } from '../../src/jobs/task-store.js';
import { deleteKeys, testLog, uniquePrefix } from '../helpers/queues.js';

/** Helpers of the tests that run BullMQ workers as processes of their own (test/jobs/worker-process.ts). */

const repoRoot = fileURLToPath(new URL('../..', import.meta.url));

export interface WorkerProcess {
  child: ChildProcess;
  /** Its process group: detached, so the worker and its sandbox children share a group of their own. */
  pgid: number;
  exited: Promise<void>;
}

/** Starts a worker process with the test's environment plus `env`; resolves once it prints "ready". */
export function startWorkerProcess(env: Record<string, string>): Promise<WorkerProcess> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, ['--import', 'tsx', 'test/jobs/worker-process.ts'], {
      cwd: repoRoot,
      detached: true,
      stdio: ['ignore', 'pipe', 'inherit'],
      env: { ...process.env, LOG_LEVEL: process.env.TEST_LOG_LEVEL ?? 'warn', ...env },
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
}

/** SIGTERM to each worker's group, then SIGKILL to what is left of it: no sandbox child outlives the test. */
export async function stopWorkerProcesses(workers: WorkerProcess[]): Promise<void> {
  for (const w of workers) {
    if (w.child.exitCode !== null || w.child.signalCode !== null) continue;
    try {
      process.kill(-w.pgid, 'SIGTERM');
    } catch {
      // Gone meanwhile.
    }
    const stopped = await Promise.race([w.exited.then(() => true), new Promise<boolean>((res) => setTimeout(() => res(false), 10_000))]);
    try {
      process.kill(-w.pgid, 'SIGKILL');
    } catch {
      // Already empty.
    }
    if (!stopped) await w.exited;
  }
}

/** The process group of a live process (field 5 of /proc/<pid>/stat, counted after the parenthesised name). */
export function processGroup(pid: number): number | null {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    return Number(stat.slice(stat.lastIndexOf(')') + 2).split(' ')[2]);
  } catch {
    return null;
  }
}

/** A fresh data folder, a BullQueue over a key prefix of its own, and two worker processes serving it. */
export interface WorkerPair {
  dir: string;
  store: TaskStore;
  queue: BullQueue;
  workers: WorkerProcess[];
}

/**
 * Registers the suite's beforeAll/afterAll: starts a WorkerPair (workers configured like `cairn
 * worker`, plus `env`) and afterwards stops the processes, closes the queue, deletes the prefix's
 * keys and the data folder. The returned object is filled in by beforeAll.
 */
export function useWorkerPair(redisUrl: string, maxAttempts: number, env: Record<string, string>): WorkerPair {
  const pair = { workers: [] as WorkerProcess[] } as unknown as WorkerPair;
  const prefix = uniquePrefix();
  beforeAll(async () => {
    pair.dir = mkdtempSync(join(tmpdir(), 'cairn-workers-test-'));
    pair.store = new TaskStore(pair.dir);
    pair.queue = await BullQueue.create({ redisUrl, prefix, store: pair.store, maxAttempts, backoffMs: 200, log: testLog });
    const all = { REDIS_URL: redisUrl, CAIRN_QUEUE_PREFIX: prefix, CAIRN_DATA_DIR: pair.dir, CAIRN_WORKER_CONCURRENCY: '1', CAIRN_COMPUTE_THREADS: '1', CAIRN_JOB_ATTEMPTS: String(maxAttempts), ...env };
    pair.workers.push(...(await Promise.all([startWorkerProcess(all), startWorkerProcess(all)])));
  }, 60_000);
  afterAll(async () => {
    await stopWorkerProcesses(pair.workers);
    await pair.queue?.close(0);
    await deleteKeys(redisUrl, prefix);
    if (pair.dir) rmSync(pair.dir, { recursive: true, force: true });
  }, 60_000);
  return pair;
}

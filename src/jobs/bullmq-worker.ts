import { hostname } from 'node:os';
import { Worker, type Job } from 'bullmq';
import type { Logger } from 'pino';
import { memoryBudgetBytes, type Config } from '../config.js';
import { QUEUE_NAMES, type ProgressMessage } from './bullmq-queue.js';
import { entryFile } from './entry-file.js';
import { errorOf } from './task-runner.js';
import { TaskStore } from './task-store.js';
import { isFinal, TASK_KINDS, type TaskRef, type TaskState } from './task.js';

/** A worker's options from the one configuration (REDIS_URL must be set). */
export function bullWorkerOptions(config: Config, log: Logger): BullWorkerOptions {
  if (!config.REDIS_URL) throw new Error('a BullMQ worker needs REDIS_URL');
  return {
    redisUrl: config.REDIS_URL,
    prefix: config.CAIRN_QUEUE_PREFIX,
    dataDir: config.CAIRN_DATA_DIR,
    concurrency: config.CAIRN_WORKER_CONCURRENCY,
    maxAttempts: config.CAIRN_JOB_ATTEMPTS,
    computeThreads: config.CAIRN_COMPUTE_THREADS,
    checkpointEveryMs: config.CAIRN_CHECKPOINT_SECONDS * 1000,
    memoryBudgetBytes: memoryBudgetBytes(config),
    modelsDir: config.CAIRN_MODELS_DIR,
    passShardRows: config.CAIRN_PASS_SHARD_ROWS,
    stalledMs: config.CAIRN_STALLED_SECONDS * 1000,
    log,
  };
}

export interface BullWorkerOptions {
  redisUrl: string;
  prefix: string;
  dataDir: string;
  /** Tasks of each kind this process runs at once (one sandbox child process each). */
  concurrency: number;
  /** Used only for a job that carries no attempts of its own (BullQueue always sets them). */
  maxAttempts: number;
  computeThreads: number;
  checkpointEveryMs: number;
  /** Bytes a selection may hold in copies of its rows (SelectContext.memoryBudgetBytes); unset: no limit. */
  memoryBudgetBytes?: number;
  /** Folder of the embedding models. Default ./models. */
  modelsDir?: string;
  /** Rows per shard of a selection's full passes; 0: no shards. Default 0. */
  passShardRows?: number;
  /** A task whose worker stopped renewing its lock this long ago goes to another worker. */
  stalledMs: number;
  log: Logger;
}

/** What the sandbox child needs besides the job: passed in its environment (the job data is only the TaskRef). */
export interface SandboxSettings {
  dataDir: string;
  maxAttempts: number;
  computeThreads: number;
  checkpointEveryMs: number;
  /** null: no limit (JSON has no Infinity). */
  memoryBudgetBytes: number | null;
  modelsDir?: string;
  passShardRows: number;
  /** Where the sandbox adds the shard tasks a selection spawns. */
  redisUrl: string;
  prefix: string;
  logLevel: string;
}

export const SANDBOX_SETTINGS_ENV = 'CAIRN_BULLMQ_SANDBOX';
/** Name of the error the sandbox throws for a transient failure whose state the runner already recorded. */
export const RETRY_ERROR_NAME = 'TaskRetryError';
/** Abort reason of running tasks when the worker shuts down. */
const SHUTDOWN = 'worker shutting down';
/** After the grace, how long stopping tasks may take (one descent step or read block) before the children are killed. */
const STOP_MS = 15_000;

/**
 * Runs queued tasks from Redis: one BullMQ Worker per task kind, each running every task in a
 * sandboxed child process (bullmq-sandbox.ts), so compute never blocks the event loop that renews
 * the jobs' locks. Any number of these processes, on any hosts sharing the data folder, serve the
 * same queues; a task whose process dies is resumed by another from its last checkpoint.
 */
export async function startBullWorker(o: BullWorkerOptions): Promise<{ close(graceMs: number): Promise<void> }> {
  const store = new TaskStore(o.dataDir);
  const entry = entryFile(import.meta.url, 'bullmq-sandbox');
  const settings: SandboxSettings = { dataDir: o.dataDir, maxAttempts: o.maxAttempts, computeThreads: o.computeThreads, checkpointEveryMs: o.checkpointEveryMs, memoryBudgetBytes: o.memoryBudgetBytes ?? null, modelsDir: o.modelsDir, passShardRows: o.passShardRows ?? 0, redisUrl: o.redisUrl, prefix: o.prefix, logLevel: o.log.level };
  // A dead worker's job moves on at the first stalled check that finds its lock expired and the job
  // marked by an earlier check: at most lockDuration + stalledInterval = stalledMs after the death.
  // The lock is renewed every quarter of its life, so only an event-loop pause of over ~3/4 of it
  // (the compute runs in the sandbox, not here) would lose a live job's lock.
  const lockDuration = Math.max(300, Math.round((o.stalledMs * 2) / 3));
  const workers = TASK_KINDS.map((kind) => {
    const w = new Worker<TaskRef>(QUEUE_NAMES[kind], entry.path, {
      connection: { url: o.redisUrl, maxRetriesPerRequest: null },
      prefix: o.prefix,
      name: `${hostname()}:${process.pid}`,
      concurrency: o.concurrency,
      lockDuration,
      lockRenewTime: Math.round(lockDuration / 4),
      stalledInterval: Math.max(200, Math.round(o.stalledMs / 3)),
      // A job resumed after its worker died counts one stall; it must not fail for that.
      maxStalledCount: 5,
      useWorkerThreads: false,
      workerForkOptions: { execArgv: childExecArgv(entry.execArgv), env: { ...process.env, [SANDBOX_SETTINGS_ENV]: JSON.stringify(settings) } },
    });
    w.on('error', (err) => o.log.warn({ err, queue: QUEUE_NAMES[kind] }, 'worker error'));
    w.on('stalled', (jobId) => o.log.warn({ jobId, queue: QUEUE_NAMES[kind] }, 'job stalled (its worker died or hung); it goes back to the queue'));
    w.on('failed', (job, err) => {
      if (job) void recordLostAttempt(store, job, err, o.log);
    });
    return w;
  });
  o.log.info({ queues: Object.values(QUEUE_NAMES), prefix: o.prefix, concurrency: o.concurrency }, 'bullmq worker started');

  let closing: Promise<void> | null = null;
  const shutdown = async (graceMs: number): Promise<void> => {
    // Worker.close() waits for running jobs and, once called, a later close(true) only returns the
    // same promise. So: pause (stop fetching; resolves when the running jobs end), and when the
    // grace is over, abort them through BullMQ's job signal. The sandbox hears that as a shutdown:
    // the task records 'queued', its job goes back to the wait list without spending an attempt,
    // and the next worker resumes it from its checkpoint.
    const idle = Promise.all(workers.map((w) => w.pause()));
    let stopped = await settlesWithin(idle, graceMs);
    if (!stopped) {
      o.log.info('grace period over: asking running tasks to stop; they stay queued and resume from their checkpoints');
      // Asked again until they stop: a job fetched while pausing was not yet there to be asked.
      const ask = () => workers.forEach((w) => w.cancelAllJobs(SHUTDOWN));
      ask();
      const again = setInterval(ask, 250);
      stopped = await settlesWithin(idle, STOP_MS);
      clearInterval(again);
    }
    // Forced only when a child did not stop: BullMQ then kills it, and its job stalls and resumes elsewhere.
    await Promise.all(workers.map((w) => w.close(!stopped)));
    o.log.info({ forced: !stopped }, 'bullmq worker closed');
  };
  return {
    close(graceMs: number) {
      closing ??= shutdown(graceMs);
      return closing;
    },
  };
}

/**
 * After an attempt that the task's runner could not record (its child process crashed or could not
 * start) or one BullMQ gave up on: writes the state the runner would have written, so the task does
 * not stay 'running' forever, and publishes it.
 */
async function recordLostAttempt(store: TaskStore, job: Job<TaskRef>, err: Error, log: Logger): Promise<void> {
  const ref = job.data;
  const gaveUp = typeof job.finishedOn === 'number';
  if (!gaveUp && err.name === RETRY_ERROR_NAME) return; // The runner wrote 'queued' with its error.
  const state = await store.readState(ref).catch(() => null);
  if (!state || isFinal(state.status)) return;
  log.error({ task: ref, err, gaveUp }, 'task attempt ended without recording its outcome');
  const now = new Date().toISOString();
  const error = err.name === RETRY_ERROR_NAME && state.error ? state.error : errorOf(err);
  const next: TaskState = gaveUp ? { ...state, status: 'failed', error, finishedAt: now, updatedAt: now } : { ...state, status: 'queued', error, updatedAt: now };
  try {
    await store.writeState(ref, next);
    await job.updateProgress({ ref, state: next } satisfies ProgressMessage);
  } catch (e) {
    log.warn({ task: ref, err: e }, 'could not record the lost attempt');
  }
}

/**
 * Node options of the sandbox children. BullMQ forks them with this process's execArgv; when
 * running from the TypeScript sources the tsx loader must be there too, even if this process got
 * its TypeScript another way (vitest). Inspector flags are dropped: a child would fight for the port.
 */
function childExecArgv(loader: string[]): string[] {
  const own = process.execArgv.filter((a) => !a.startsWith('--inspect'));
  const has = (spec: string) => own.some((a, i) => a === `--import=${spec}` || (a === '--import' && own[i + 1] === spec));
  const present = loader.length === 2 && loader[0] === '--import' && has(loader[1]);
  return present ? own : [...own, ...loader];
}

/** Whether `p` settles within `ms`. */
async function settlesWithin(p: Promise<unknown>, ms: number): Promise<boolean> {
  let timer: NodeJS.Timeout | undefined;
  const timeout = new Promise<false>((resolve) => {
    timer = setTimeout(() => resolve(false), ms);
  });
  try {
    return await Promise.race([p.then(() => true, () => true), timeout]);
  } finally {
    clearTimeout(timer);
  }
}

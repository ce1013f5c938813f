import { Queue, UnrecoverableError, WaitingError, type SandboxedJob } from 'bullmq';
import pino from 'pino';
import { jobIdOf, QUEUE_NAMES, type ProgressMessage } from './bullmq-queue.js';
import { RETRY_ERROR_NAME, SANDBOX_SETTINGS_ENV, type SandboxSettings } from './bullmq-worker.js';
import { runAttempt } from './task-runner.js';
import { TaskStore } from './task-store.js';
import { taskKey, type TaskError, type TaskRef } from './task.js';

/**
 * The processor file of the BullMQ workers: BullMQ runs it in a child process of the worker (a
 * sandbox), one attempt of one task at a time, so a selection's compute never blocks the worker's
 * event loop (which renews the job's lock) and a native crash takes down only the child.
 *
 * The outcome reaches the worker as the processor's result or as an error, which BullMQ serialises
 * across the process boundary keeping its own properties (message, stack, and the `name` these
 * classes set), and then recognises by name:
 * - completed, cancelled, gone: returned; nothing is left to do;
 * - retry: a TaskRetryError; BullMQ retries after its backoff (the runner already wrote 'queued');
 * - failed: an UnrecoverableError; BullMQ fails the job at once, whatever attempts remain;
 * - interrupted (the worker is shutting down): the job is moved back to the wait list and a
 *   WaitingError thrown, which BullMQ takes as "moved, not failed", so the stop spends no attempt
 *   (not even the last one) and the next worker resumes the same attempt from its checkpoint. Had
 *   the move not reached Redis, the job's lock expires and it is resumed as a stalled job instead.
 */

class TaskRetryError extends Error {
  override name = RETRY_ERROR_NAME;
}

const settings = readSettings();
const store = new TaskStore(settings.dataDir);
const log = pino({ level: settings.logLevel, base: { pid: process.pid, sandbox: 'bullmq' } });

export default async function processTask(job: SandboxedJob<TaskRef>, token?: string, signal?: AbortSignal): Promise<string> {
  const ref = job.data;
  const { outcome, error } = await runAttempt({
    store,
    ref,
    // attemptsMade counts ended attempts; a stalled or interrupted one did not end, so it resumes under the same number.
    attempt: job.attemptsMade + 1,
    // BullMQ decides retries by the job's own attempts: the runner must agree with it.
    maxAttempts: job.opts.attempts ?? settings.maxAttempts,
    shutdown: signal,
    computeThreads: settings.computeThreads,
    checkpointEveryMs: settings.checkpointEveryMs,
    memoryBudgetBytes: settings.memoryBudgetBytes ?? undefined,
    modelsDir: settings.modelsDir,
    passShardRows: settings.passShardRows,
    spawn,
    withdraw,
    // Published for the API's QueueEvents; a lost update is harmless (state.json is the truth).
    onState: (state) => void job.updateProgress({ ref, state } satisfies ProgressMessage).catch(() => undefined),
    log,
  });
  switch (outcome) {
    case 'completed':
    case 'cancelled':
    case 'gone':
      return outcome;
    case 'retry':
      throw new TaskRetryError(describe(error));
    case 'failed':
      throw new UnrecoverableError(describe(error));
    case 'interrupted':
      await job.moveToWait(token);
      throw new WaitingError();
  }
}

let passQueue: Queue | null = null;

function shardQueue(): Queue {
  if (!passQueue) {
    passQueue = new Queue(QUEUE_NAMES.pass, { connection: { url: settings.redisUrl, maxRetriesPerRequest: 1 }, prefix: settings.prefix });
    passQueue.on('error', (err) => log.warn({ err }, 'pass queue connection error'));
  }
  return passQueue;
}

/**
 * Adds a selection's pass shards to the 'pass' queue, for any worker. One attempt each: a shard
 * nobody finishes is computed by its selection itself. Finished shard jobs leave Redis after an hour.
 */
async function spawn(refs: TaskRef[]): Promise<void> {
  await shardQueue().addBulk(
    refs.map((ref) => {
      if (ref.kind !== 'pass') throw new Error(`a selection spawns pass shards only, not ${ref.kind} tasks`);
      return { name: taskKey(ref), data: ref, opts: { jobId: jobIdOf(ref), attempts: 1, removeOnComplete: { age: 3600 }, removeOnFail: { age: 3600 } } };
    }),
  );
}

/** Removes shard jobs still waiting (remove() leaves a job a worker has locked alone). */
async function withdraw(refs: TaskRef[]): Promise<void> {
  const q = shardQueue();
  await Promise.all(refs.map((ref) => q.remove(jobIdOf(ref)).catch(() => 0)));
}

function readSettings(): SandboxSettings {
  const text = process.env[SANDBOX_SETTINGS_ENV];
  if (!text) throw new Error(`${SANDBOX_SETTINGS_ENV} is not set: this file runs only as the processor of startBullWorker`);
  return JSON.parse(text) as SandboxSettings;
}

function describe(error: TaskError | null): string {
  return error ? `${error.code}: ${error.message}` : 'task failed';
}

import { randomBytes } from 'node:crypto';
import { Redis } from 'ioredis';
import pino from 'pino';
import { BullQueue } from '../../src/jobs/bullmq-queue.js';
import { startBullWorker } from '../../src/jobs/bullmq-worker.js';
import { EmbeddedQueue } from '../../src/jobs/embedded-queue.js';
import type { JobQueue } from '../../src/jobs/queue.js';
import type { TaskStore } from '../../src/jobs/task-store.js';

export interface QueueOptions {
  maxAttempts: number;
  backoffMs: number;
  checkpointEveryMs: number;
}

/** A queue under test plus a way to stop it and start a fresh one over the same data (a restart). */
export interface QueueHarness {
  queue: JobQueue;
  /** Closes the current queue with the grace given, then starts a new one over the same store. */
  restart(graceMs: number): Promise<JobQueue>;
  close(): Promise<void>;
}

export interface QueueFactory {
  name: string;
  create(store: TaskStore, o: QueueOptions): Promise<QueueHarness>;
}

export const testLog = pino({ level: process.env.TEST_LOG_LEVEL ?? 'silent' });

export const embeddedQueueFactory: QueueFactory = {
  name: 'embedded',
  async create(store, o) {
    const make = async () => {
      const q = new EmbeddedQueue({ store, concurrency: 1, maxAttempts: o.maxAttempts, computeThreads: 1, checkpointEveryMs: o.checkpointEveryMs, backoffMs: o.backoffMs, log: testLog });
      await q.start();
      return q;
    };
    let queue = await make();
    const harness: QueueHarness = {
      queue,
      async restart(graceMs) {
        await queue.close(graceMs);
        queue = await make();
        harness.queue = queue;
        return queue;
      },
      async close() {
        await queue.close(0);
      },
    };
    return harness;
  },
};

/** The Redis of the BullMQ tests. */
export function testRedisUrl(): string {
  return process.env.REDIS_URL ?? 'redis://127.0.0.1:6379';
}

/** A key prefix of its own for one test run, so runs (and parallel test files) never share queues. */
export function uniquePrefix(): string {
  return `cairn-test-${process.pid}-${randomBytes(4).toString('hex')}`;
}

/** Whether Redis answers a PING within a second. */
export async function redisAnswers(url = testRedisUrl()): Promise<boolean> {
  const r = new Redis(url, { lazyConnect: true, enableOfflineQueue: false, maxRetriesPerRequest: 0, retryStrategy: () => null, connectTimeout: 1000 });
  r.on('error', () => undefined);
  try {
    await r.connect();
    return (await r.ping()) === 'PONG';
  } catch {
    return false;
  } finally {
    r.disconnect();
  }
}

/** Deletes every key under the prefix (what a test run's queues left in Redis). */
export async function deleteKeys(url: string, prefix: string): Promise<void> {
  const r = new Redis(url);
  try {
    let cursor = '0';
    do {
      const [next, keys] = await r.scan(cursor, 'MATCH', `${prefix}:*`, 'COUNT', 500);
      if (keys.length) await r.del(...keys);
      cursor = next;
    } while (cursor !== '0');
  } finally {
    r.disconnect();
  }
}

/** BullMQ against a real Redis, with one in-process worker (its tasks run in sandbox child processes). */
export const bullmqQueueFactory: QueueFactory = {
  name: 'bullmq',
  async create(store, o) {
    const redisUrl = testRedisUrl();
    const prefix = uniquePrefix();
    const queue = await BullQueue.create({ redisUrl, prefix, store, maxAttempts: o.maxAttempts, backoffMs: o.backoffMs, log: testLog });
    const startWorker = () =>
      startBullWorker({ redisUrl, prefix, dataDir: store.dataDir, concurrency: 1, maxAttempts: o.maxAttempts, computeThreads: 1, checkpointEveryMs: o.checkpointEveryMs, stalledMs: 2000, log: testLog });
    let worker = await startWorker();
    return {
      queue,
      async restart(graceMs) {
        await worker.close(graceMs);
        worker = await startWorker();
        return queue;
      },
      async close() {
        await worker.close(0);
        await queue.close(0);
        await deleteKeys(redisUrl, prefix);
      },
    };
  },
};

/** The adapters the conformance suite runs against. */
export function queueFactories(): QueueFactory[] {
  return [embeddedQueueFactory, bullmqQueueFactory];
}

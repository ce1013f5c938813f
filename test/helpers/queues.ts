import pino from 'pino';
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

/** The adapters the conformance suite runs against; BullMQ is added when its factory exists (see below). */
export function queueFactories(): QueueFactory[] {
  return [embeddedQueueFactory, ...extraFactories];
}

const extraFactories: QueueFactory[] = [];

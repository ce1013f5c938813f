import type { TaskRef, TaskState } from './task.js';

export interface QueueEvent {
  ref: TaskRef;
  state: TaskState;
}

export interface QueueCounts {
  /** Waiting to start, including retries waiting out their backoff. */
  waiting: number;
  active: number;
}

/**
 * The one interface of the two queues: BullMQ on Redis (workers anywhere) and the embedded queue
 * (worker threads of the API's process). Tasks themselves live in the TaskStore; a queue only
 * decides who runs them when, retries transient failures, and reports their state as it changes.
 * Both pass test/jobs/queue-conformance.test.ts.
 */
export interface JobQueue {
  readonly mode: 'embedded' | 'bullmq';
  /**
   * Hands a created task (queued, in the store) to the workers. Idempotent per task. `children`
   * (created tasks too) run first, on any worker; the task starts once each has finished, whether
   * it succeeded or not (a parent must cope with a failed child, e.g. by doing its part itself).
   */
  enqueue(ref: TaskRef, children?: TaskRef[]): Promise<void>;
  /** Stops a task: removed if waiting; a running one stops at its next check. The caller has written the cancel marker. */
  cancel(ref: TaskRef): Promise<void>;
  /** Every state a runner writes (start, progress, end), pushed as it happens. */
  subscribe(listener: (e: QueueEvent) => void): () => void;
  counts(): Promise<QueueCounts>;
  /** Whether the queue can take work now (Redis answering, for BullMQ). */
  ready(): Promise<boolean>;
  /** Stops taking work; running tasks get `graceMs` to finish, then stop and stay queued to resume. */
  close(graceMs: number): Promise<void>;
}

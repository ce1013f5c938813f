import { EventEmitter } from 'node:events';
import { FlowProducer, Queue, QueueEvents, type JobsOptions } from 'bullmq';
import { Redis } from 'ioredis';
import type { Logger } from 'pino';
import { cancelUnstarted } from './cancel-unstarted.js';
import type { JobQueue, QueueCounts, QueueEvent } from './queue.js';
import type { TaskStore } from './task-store.js';
import { TASK_KINDS, taskKey, type TaskKind, type TaskRef, type TaskState } from './task.js';

/** BullMQ queue of each task kind, under the configured key prefix (`<prefix>:<name>:…` in Redis). */
export const QUEUE_NAMES: Record<TaskKind, string> = { dataset: 'ingest', job: 'select', embed: 'embed', pass: 'pass' };

/** What a worker publishes with job.updateProgress: every state its runner writes. */
export interface ProgressMessage {
  ref: TaskRef;
  state: TaskState;
}

/**
 * The BullMQ job id of a task: `<kind>.<tenant>.<id>`. It is deterministic, so enqueueing a task
 * twice adds one job (BullMQ ignores an add whose id exists). BullMQ rejects ':' in custom ids
 * (its key separator), so taskKey's ':' become '.'; kinds and tenants (TENANT_NAME) never hold a
 * '.', so the first two dots split the id back even if a task id held one.
 */
export function jobIdOf(ref: TaskRef): string {
  return `${ref.kind}.${ref.tenant}.${ref.id}`;
}

export interface BullQueueOptions {
  redisUrl: string;
  prefix: string;
  /** Where cancel() records a task it removed before it started. */
  store: TaskStore;
  maxAttempts: number;
  /** First retry delay; doubles per attempt. Default 1000 ms. */
  backoffMs?: number;
  log: Logger;
}

/** Finished jobs stay in Redis this long; the task folder on disk is the lasting record. */
const KEEP_FINISHED_SECONDS = 24 * 3600;
const PING_TIMEOUT_MS = 1000;
/** Counted as waiting: new jobs, retries waiting out their backoff, prioritized ones, and parents waiting for their children. */
const WAITING_TYPES = ['waiting', 'delayed', 'prioritized', 'waiting-children'] as const;

/**
 * The API side of the BullMQ queue: adds tasks to Redis, cancels waiting ones, and relays the states
 * that workers (any process, any host, see startBullWorker) publish as job progress. It runs no
 * task itself.
 */
export class BullQueue implements JobQueue {
  readonly mode = 'bullmq' as const;
  private readonly events = new EventEmitter();
  private closing = false;

  private constructor(
    private readonly o: BullQueueOptions,
    private readonly queues: Record<TaskKind, Queue>,
    private readonly queueEvents: QueueEvents[],
    private readonly flows: FlowProducer,
    /** A connection of its own for ready(): it fails fast instead of queueing commands while Redis is away. */
    private readonly probe: Redis,
  ) {
    this.events.setMaxListeners(0);
  }

  /** Connects to Redis; throws when Redis does not answer, so a misconfigured API stops at start-up. */
  static async create(o: BullQueueOptions): Promise<BullQueue> {
    const probe = new Redis(o.redisUrl, { enableOfflineQueue: false, maxRetriesPerRequest: 1, lazyConnect: true });
    probe.on('error', (err) => o.log.debug({ err }, 'redis probe connection error'));
    try {
      await withTimeout(probe.connect(), 5000, 'no answer within 5 s');
    } catch (err) {
      probe.disconnect();
      throw new Error(`Redis at ${redactUrl(o.redisUrl)} does not answer (${(err as Error).message})`, { cause: err });
    }
    // Adds fail after a reconnection attempt instead of hanging an API request while Redis is down;
    // QueueEvents blocks on XREAD, which BullMQ requires to retry forever (maxRetriesPerRequest null).
    const queueConnection = { url: o.redisUrl, maxRetriesPerRequest: 1 };
    const eventsConnection = { url: o.redisUrl, maxRetriesPerRequest: null };
    const queues = {} as Record<TaskKind, Queue>;
    const queueEvents: QueueEvents[] = [];
    for (const kind of TASK_KINDS) {
      const q = new Queue(QUEUE_NAMES[kind], { connection: queueConnection, prefix: o.prefix });
      q.on('error', (err) => o.log.warn({ err, queue: QUEUE_NAMES[kind] }, 'queue connection error'));
      queues[kind] = q;
      const ev = new QueueEvents(QUEUE_NAMES[kind], { connection: eventsConnection, prefix: o.prefix });
      ev.on('error', (err) => o.log.warn({ err, queue: QUEUE_NAMES[kind] }, 'queue events connection error'));
      queueEvents.push(ev);
    }
    const flows = new FlowProducer({ connection: queueConnection, prefix: o.prefix });
    flows.on('error', (err) => o.log.warn({ err }, 'flow producer connection error'));
    const queue = new BullQueue(o, queues, queueEvents, flows, probe);
    for (const ev of queueEvents) {
      ev.on('progress', ({ data }) => {
        const m = data as Partial<ProgressMessage> | null;
        if (typeof m === 'object' && m?.ref && m.state) queue.events.emit('state', { ref: m.ref, state: m.state } satisfies QueueEvent);
      });
    }
    // Connected before the first enqueue, so the relay starts with the first task's states.
    try {
      await Promise.all([...queueEvents.map((e) => e.waitUntilReady()), ...Object.values(queues).map((q) => q.waitUntilReady())]);
    } catch (err) {
      await queue.close(0);
      throw err;
    }
    return queue;
  }

  private jobOptions(ref: TaskRef): JobsOptions {
    return {
      jobId: jobIdOf(ref),
      attempts: this.o.maxAttempts,
      backoff: { type: 'exponential', delay: this.o.backoffMs ?? 1000 },
      removeOnComplete: { age: KEEP_FINISHED_SECONDS },
      removeOnFail: { age: KEEP_FINISHED_SECONDS },
    };
  }

  async enqueue(ref: TaskRef, children: TaskRef[] = []): Promise<void> {
    if (!children.length) {
      await this.queues[ref.kind].add(taskKey(ref), ref, this.jobOptions(ref));
      return;
    }
    // A BullMQ flow: the parent waits in 'waiting-children' until every child has finished, then
    // any worker takes it. A failed child must not block it for ever (ignoreDependencyOnFailure):
    // the parent then does the child's part itself, or fails with the child's cause.
    await this.flows.add({
      name: taskKey(ref),
      queueName: QUEUE_NAMES[ref.kind],
      data: ref,
      prefix: this.o.prefix,
      opts: this.jobOptions(ref),
      children: children.map((c) => ({
        name: taskKey(c),
        queueName: QUEUE_NAMES[c.kind],
        data: c,
        prefix: this.o.prefix,
        opts: { ...this.jobOptions(c), ignoreDependencyOnFailure: true },
      })),
    });
  }

  async cancel(ref: TaskRef): Promise<void> {
    const queue = this.queues[ref.kind];
    const id = jobIdOf(ref);
    const state = await queue.getJobState(id);
    if (!(WAITING_TYPES as readonly string[]).includes(state)) return; // Running (it sees the cancel marker), finished or unknown.
    // remove() refuses (0) a job a worker has locked meanwhile: then the runner sees the marker.
    if ((await queue.remove(id)) !== 1) return;
    const next = await cancelUnstarted(this.o.store, ref);
    if (next) this.events.emit('state', { ref, state: next } satisfies QueueEvent);
  }

  subscribe(listener: (e: QueueEvent) => void): () => void {
    this.events.on('state', listener);
    return () => this.events.off('state', listener);
  }

  async counts(): Promise<QueueCounts> {
    const all = await Promise.all(Object.values(this.queues).map((q) => q.getJobCounts(...WAITING_TYPES, 'active')));
    let waiting = 0;
    let active = 0;
    for (const c of all) {
      for (const t of WAITING_TYPES) waiting += c[t] ?? 0;
      active += c.active ?? 0;
    }
    return { waiting, active };
  }

  async ready(): Promise<boolean> {
    if (this.closing) return false;
    try {
      return (await withTimeout(this.probe.ping(), PING_TIMEOUT_MS, 'ping timed out')) === 'PONG';
    } catch {
      return false;
    }
  }

  /** No task runs in this process, so there is nothing to wait for: `_graceMs` is the workers' business. */
  async close(_graceMs: number): Promise<void> {
    if (this.closing) return;
    this.closing = true;
    await Promise.allSettled([...this.queueEvents.map((e) => e.close()), ...Object.values(this.queues).map((q) => q.close()), this.flows.close()]);
    this.probe.disconnect();
    this.events.removeAllListeners();
  }
}

function withTimeout<T>(p: Promise<T>, ms: number, message: string): Promise<T> {
  let timer: NodeJS.Timeout | undefined;
  const timeout = new Promise<never>((_, reject) => {
    timer = setTimeout(() => reject(new Error(message)), ms);
  });
  return Promise.race([p, timeout]).finally(() => clearTimeout(timer));
}

/** The URL without its password, for messages. */
function redactUrl(url: string): string {
  try {
    const u = new URL(url);
    if (u.password) u.password = '***';
    return u.toString();
  } catch {
    return 'REDIS_URL';
  }
}

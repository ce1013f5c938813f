import { readFileSync } from 'node:fs';
import { availableParallelism } from 'node:os';
import { join } from 'node:path';
import pino, { type Logger } from 'pino';
import { memoryBudgetBytes, parseApiKeys, type Config } from '../config.js';
import { EmbeddedQueue } from '../jobs/embedded-queue.js';
import type { JobQueue } from '../jobs/queue.js';
import { TaskStore } from '../jobs/task-store.js';
import { isFinal, TASK_KINDS } from '../jobs/task.js';
import { buildApp, type App } from './app.js';
import { ApiKeys } from './auth.js';
import { ModelRegistry } from '../embed/model-registry.js';
import { IdempotencyStore } from './idempotency.js';
import { Metrics } from './metrics.js';
import { applyRetention } from './retention.js';

export interface RunningServer {
  app: App;
  queue: JobQueue;
  store: TaskStore;
  /** The address it listens on, e.g. http://127.0.0.1:8080. */
  url: string;
  /** Stops accepting requests, lets running work finish within the grace period (or leaves it to resume), and closes. */
  close(): Promise<void>;
}

const RETENTION_EVERY_MS = 3600 * 1000;

async function requeueUnfinished(store: TaskStore, queue: JobQueue): Promise<number> {
  let count = 0;
  for (const tenant of await store.tenants()) {
    for (const kind of TASK_KINDS) {
      for (const id of await store.list(tenant, kind)) {
        const ref = { kind, tenant, id };
        const state = await store.readState(ref).catch(() => null);
        if (state && !isFinal(state.status)) {
          await queue.enqueue(ref);
          count++;
        }
      }
    }
  }
  return count;
}

export function packageVersion(): string {
  try {
    return (JSON.parse(readFileSync(new URL('../../package.json', import.meta.url), 'utf8')) as { version: string }).version;
  } catch {
    return '0.0.0';
  }
}

/**
 * `cairn serve`: the API, and with no REDIS_URL the embedded queue running jobs in worker threads
 * of this process. Without API keys it binds to 127.0.0.1 only, whatever CAIRN_HOST says.
 */
export async function startServer(config: Config, log: Logger = pino({ level: config.LOG_LEVEL })): Promise<RunningServer> {
  const store = new TaskStore(config.CAIRN_DATA_DIR);
  const keys = new ApiKeys(parseApiKeys(config.CAIRN_API_KEYS));
  const host = keys.enabled ? config.CAIRN_HOST : '127.0.0.1';
  if (!keys.enabled) log.warn({ host }, 'no API keys configured: auth is off, listening on 127.0.0.1 only');

  const removed = await store.sweepLeftovers();
  if (removed) log.info({ removed }, 'removed leftovers of an earlier crash');
  let queue: JobQueue;
  if (config.REDIS_URL) {
    // Loaded only when configured: embedded installs never open a Redis client.
    const { BullQueue } = await import('../jobs/bullmq-queue.js');
    queue = await BullQueue.create({ redisUrl: config.REDIS_URL, prefix: config.CAIRN_QUEUE_PREFIX, store, maxAttempts: config.CAIRN_JOB_ATTEMPTS, log });
    // The task folders are the record: hand Redis every unfinished task again, in case Redis lost
    // it (a restart without persistence). Job ids are fixed per task, so known ones are not doubled.
    const requeued = await requeueUnfinished(store, queue);
    if (requeued) log.info({ tasks: requeued }, 'handed unfinished tasks to the queue');
  } else {
    // Leave a core to the API's event loop, so status polls stay fast while a selection runs.
    const cores = availableParallelism();
    const threads = config.CAIRN_COMPUTE_THREADS || Math.max(1, cores - 1);
    const embedded = new EmbeddedQueue({
      store,
      concurrency: config.CAIRN_WORKER_CONCURRENCY,
      maxAttempts: config.CAIRN_JOB_ATTEMPTS,
      computeThreads: threads,
      checkpointEveryMs: config.CAIRN_CHECKPOINT_SECONDS * 1000,
      memoryBudgetBytes: memoryBudgetBytes(config),
      modelsDir: config.CAIRN_MODELS_DIR,
      passShardRows: config.CAIRN_PASS_SHARD_ROWS,
      log,
    });
    await embedded.start();
    queue = embedded;
  }
  const models = await ModelRegistry.load(config.CAIRN_MODELS_DIR, log);
  const idempotency = new IdempotencyStore(join(config.CAIRN_DATA_DIR, 'idempotency'));
  const metrics = new Metrics(queue);
  const unsubscribe = queue.subscribe(({ ref, state }) => {
    if (isFinal(state.status) && state.startedAt && state.finishedAt) {
      metrics.taskSeconds.observe({ kind: ref.kind, status: state.status }, (Date.parse(state.finishedAt) - Date.parse(state.startedAt)) / 1000);
    }
  });
  const lifecycle = { closing: false };
  const app = await buildApp({ config, store, queue, log, keys, idempotency, metrics, version: packageVersion(), lifecycle, models });
  const retention = () => applyRetention(store, idempotency, config.CAIRN_RETENTION_HOURS, log).catch((err: unknown) => log.error({ err }, 'retention failed'));
  void retention();
  const timer = setInterval(retention, RETENTION_EVERY_MS).unref();
  await app.listen({ host, port: config.CAIRN_PORT });
  const address = app.server.address();
  const url = typeof address === 'object' && address ? `http://${host.includes(':') ? `[${host}]` : host}:${address.port}` : `http://${host}:${config.CAIRN_PORT}`;
  log.info({ url, queue: queue.mode, auth: keys.enabled }, 'cairn API listening');

  let closing: Promise<void> | null = null;
  return {
    app,
    queue,
    store,
    url,
    close() {
      lifecycle.closing = true;
      closing ??= (async () => {
        clearInterval(timer);
        await app.close();
        await queue.close(config.CAIRN_SHUTDOWN_GRACE_SECONDS * 1000);
        unsubscribe();
        log.info('cairn API stopped');
      })();
      return closing;
    },
  };
}

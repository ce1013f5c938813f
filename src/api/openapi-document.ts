import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import pino from 'pino';
import { loadConfig } from '../config.js';
import { EmbeddedQueue } from '../jobs/embedded-queue.js';
import { TaskStore } from '../jobs/task-store.js';
import { buildApp } from './app.js';
import { ApiKeys } from './auth.js';
import { IdempotencyStore } from './idempotency.js';
import { Metrics } from './metrics.js';
import { ModelRegistry } from '../embed/model-registry.js';
import { packageVersion } from './server.js';

/**
 * The OpenAPI document, generated from the routes' zod schemas by an app that is built but never
 * listens (its queue is never started). `npm run openapi` writes it to openapi/openapi.json; a test
 * fails when the committed file differs.
 */
export async function openapiDocument(): Promise<Record<string, unknown>> {
  const dir = mkdtempSync(join(tmpdir(), 'cairn-openapi-'));
  const log = pino({ level: 'silent' });
  const store = new TaskStore(dir);
  const queue = new EmbeddedQueue({ store, concurrency: 1, maxAttempts: 1, computeThreads: 1, checkpointEveryMs: 1000, log });
  const app = await buildApp({
    config: loadConfig({ CAIRN_DATA_DIR: dir }),
    store,
    queue,
    log,
    keys: new ApiKeys([]),
    idempotency: new IdempotencyStore(join(dir, 'idempotency')),
    metrics: new Metrics(queue),
    models: await ModelRegistry.load(join(dir, 'no-models'), { info: () => undefined, warn: () => undefined }),
    version: packageVersion(),
  });
  try {
    await app.ready();
    return app.swagger() as unknown as Record<string, unknown>;
  } finally {
    await app.close();
    rmSync(dir, { recursive: true, force: true });
  }
}

export function openapiText(doc: Record<string, unknown>): string {
  return JSON.stringify(doc, null, 2) + '\n';
}

import { randomBytes } from 'node:crypto';
import { mkdir, unlink, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { z } from 'zod';
import type { App, AppDeps } from './app.js';

const noLimit = { rateLimit: false as const };

/** Liveness, readiness and metrics: unauthenticated, not rate limited, not under /v1. */
export function opsRoutes(app: App, deps: AppDeps): void {
  app.get('/healthz', { config: noLimit, schema: { summary: 'Liveness', tags: ['ops'], security: [], response: { 200: z.object({ status: z.literal('ok') }) } } }, async () => ({ status: 'ok' as const }));

  app.get(
    '/readyz',
    {
      config: noLimit,
      schema: {
        summary: 'Readiness: the queue (Redis, when configured) and the data folder',
        tags: ['ops'],
        security: [],
        response: { 200: readiness, 503: readiness },
      },
    },
    async (_req, reply) => {
      const [queueOk, diskOk] = await Promise.all([deps.queue.ready().catch(() => false), writable(deps.store.dataDir)]);
      const ok = queueOk && diskOk;
      return reply.status(ok ? 200 : 503).send({ status: ok ? 'ready' : 'not-ready', checks: { queue: queueOk, disk: diskOk }, queue: deps.queue.mode });
    },
  );

  app.get('/metrics', { config: noLimit, schema: { summary: 'Prometheus metrics', tags: ['ops'], security: [], produces: ['text/plain'] } }, async (_req, reply) => {
    const text = await deps.metrics.registry.metrics();
    return reply.type(deps.metrics.registry.contentType).send(text);
  });

  app.get('/openapi.json', { config: noLimit, schema: { hide: true } }, async () => app.swagger());
}

const readiness = z.object({ status: z.enum(['ready', 'not-ready']), checks: z.object({ queue: z.boolean(), disk: z.boolean() }), queue: z.enum(['embedded', 'bullmq']) });

/** The data folder accepts a write (disk present, mounted read-write, not full). */
async function writable(dir: string): Promise<boolean> {
  const probe = join(dir, `.ready-${randomBytes(4).toString('hex')}`);
  try {
    await mkdir(dir, { recursive: true });
    await writeFile(probe, 'ok');
    await unlink(probe);
    return true;
  } catch {
    return false;
  }
}

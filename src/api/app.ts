import multipart from '@fastify/multipart';
import rateLimit from '@fastify/rate-limit';
import swagger from '@fastify/swagger';
import swaggerUi from '@fastify/swagger-ui';
import Fastify, { type FastifyBaseLogger, type FastifyInstance, type RawServerDefault } from 'fastify';
import { hasZodFastifySchemaValidationErrors, jsonSchemaTransform, serializerCompiler, validatorCompiler, type ZodTypeProvider } from 'fastify-type-provider-zod';
import type { IncomingMessage, ServerResponse } from 'node:http';
import type { Logger } from 'pino';
import type { Config } from '../config.js';
import { CairnError, ERROR_CATALOGUE, type ErrorCode } from '../errors.js';
import type { JobQueue } from '../jobs/queue.js';
import type { TaskStore } from '../jobs/task-store.js';
import type { ApiKeys } from './auth.js';
import { datasetRoutes } from './dataset-routes.js';
import type { IdempotencyStore } from './idempotency.js';
import { jobRoutes } from './job-routes.js';
import type { Metrics } from './metrics.js';
import type { ModelRegistry } from '../embed/model-registry.js';
import { modelRoutes } from './model-routes.js';
import { reviewRoutes } from './review-routes.js';
import { reportRoutes } from './report-routes.js';
import { opsRoutes } from './ops-routes.js';
import { RequestLog } from './request-log.js';
import { EventStreams } from './event-streams.js';
import { TaskReader } from './task-reader.js';

export type App = FastifyInstance<RawServerDefault, IncomingMessage, ServerResponse, FastifyBaseLogger, ZodTypeProvider>;

export interface AppDeps {
  config: Config;
  store: TaskStore;
  queue: JobQueue;
  log: Logger;
  keys: ApiKeys;
  idempotency: IdempotencyStore;
  metrics: Metrics;
  /** Embedding models, validated at start-up. */
  models: ModelRegistry;
  version: string;
  /** Set to true when shutdown begins: requests from then on get SERVICE_SHUTTING_DOWN. */
  lifecycle?: { closing: boolean };
}

/** What the route modules get: the app's dependencies plus the cached reader of task files. */
export interface RouteDeps extends AppDeps {
  reader: TaskReader;
}

declare module 'fastify' {
  interface FastifyRequest {
    /** Set by the auth hook on /v1 routes. */
    tenant: string;
  }
}

const API_DESCRIPTION = `Picks k representative items, with weights and coverage statistics, from an uploaded dataset.

Upload a dataset (POST /v1/datasets), wait for its ingestion to complete, create selection jobs on it
(POST /v1/jobs), follow their progress (GET /v1/jobs/{id} or the Server-Sent Events stream), then fetch
the result, the per-item assignments and, for image datasets, a contact sheet.

Authentication: \`Authorization: Bearer <key>\` (unless the server runs without keys, on 127.0.0.1).
Another tenant's datasets and jobs answer 404.

POST requests accept an \`Idempotency-Key\` header: a retry with the same key and request gets the
first answer (kept 24 hours).

Errors: every error answer is \`{"error": {"code", "message", "details"}}\` with one of these codes:

| code | HTTP status | meaning |
|---|---|---|
${Object.entries(ERROR_CATALOGUE)
  .map(([code, e]) => `| ${code} | ${e.status} | ${e.message} |`)
  .join('\n')}
`;

/** The fastify app: routes, validation, auth, rate limits and the error shape. Listening is the caller's. */
export async function buildApp(deps: AppDeps): Promise<App> {
  const { config, keys, log } = deps;
  let requestCount = 0;
  // Unique per process start; the per-request part is a counter only.
  const reqIdPrefix = `req-${Date.now().toString(36)}-`;
  const app = Fastify({
    loggerInstance: log as FastifyBaseLogger,
    genReqId: () => reqIdPrefix + (++requestCount).toString(36),
    bodyLimit: 1024 * 1024,
    logController: new RequestLog(),
    // Requests that arrive while closing get the catalogued 503 below, not fastify's own body.
    return503OnClosing: false,
  }).withTypeProvider<ZodTypeProvider>();
  app.setValidatorCompiler(validatorCompiler);
  app.setSerializerCompiler(serializerCompiler);
  app.decorateRequest('tenant', '');

  await app.register(swagger, {
    openapi: {
      openapi: '3.1.0',
      info: { title: 'cairn', version: deps.version, description: API_DESCRIPTION },
      components: { securitySchemes: { apiKey: { type: 'http', scheme: 'bearer', description: 'An API key from the server configuration.' } } },
      security: [{ apiKey: [] }],
    },
    transform: jsonSchemaTransform,
  });
  await app.register(swaggerUi, { routePrefix: '/docs' });
  await app.register(multipart, { limits: { fileSize: config.CAIRN_MAX_UPLOAD_BYTES, files: 1, fields: 20, fieldSize: 64 * 1024 } });
  if (config.CAIRN_RATE_LIMIT_PER_MINUTE > 0) {
    await app.register(rateLimit, {
      max: config.CAIRN_RATE_LIMIT_PER_MINUTE,
      timeWindow: 60_000,
      hook: 'preHandler',
      // Only the /v1 API is limited: probes and scrapes must always answer.
      allowList: (req) => !req.url.startsWith('/v1/'),
      keyGenerator: (req) => (keys.enabled ? `tenant:${req.tenant}` : `ip:${req.ip}`),
      errorResponseBuilder: (_req, ctx) => new CairnError('RATE_LIMITED', undefined, { limit: ctx.max, retryAfterSeconds: Math.ceil(ctx.ttl / 1000) }),
    });
  }

  const lifecycle = deps.lifecycle ?? { closing: false };
  app.addHook('preClose', async () => {
    lifecycle.closing = true;
  });
  // Callback hooks, not async ones: they run on every request, and a promise each is measurable
  // in scripts/bench/status-poll.mjs.
  app.addHook('onRequest', (req, _reply, done) => {
    try {
      if (lifecycle.closing) throw new CairnError('SERVICE_SHUTTING_DOWN');
      if (req.url.startsWith('/v1/')) req.tenant = keys.tenantOfRequest(req.method, req.url, req.headers.authorization);
    } catch (err) {
      done(err as Error);
      return;
    }
    done();
  });
  app.addHook('onResponse', (req, reply, done) => {
    deps.metrics.httpSeconds.observe({ method: req.method, route: req.routeOptions.url ?? 'unknown', status: String(reply.statusCode) }, reply.elapsedTime / 1000);
    done();
  });

  app.setNotFoundHandler((req, reply) => {
    void reply.status(404).send(new CairnError('ROUTE_NOT_FOUND', `No route ${req.method} ${req.url.split('?')[0]}.`).toJSON());
  });
  app.setErrorHandler((err, req, reply) => {
    const e = toCairnError(err);
    if (e.status >= 500) req.log.error({ err }, 'request failed');
    if (e.code === 'RATE_LIMITED') void reply.header('retry-after', String(e.details.retryAfterSeconds ?? 60));
    void reply.status(e.status).send(e.toJSON());
  });

  const streams = new EventStreams(deps.queue);
  const routeDeps: RouteDeps = { ...deps, reader: new TaskReader(deps.store, deps.queue) };
  app.addHook('preClose', async () => streams.closeAll());
  await app.register(async (v1) => {
    datasetRoutes(v1 as App, routeDeps, streams);
    jobRoutes(v1 as App, routeDeps, streams);
    modelRoutes(v1 as App, routeDeps);
    reviewRoutes(v1 as App, routeDeps);
    reportRoutes(v1 as App, routeDeps);
  });
  opsRoutes(app, deps);
  return app;
}

/** Maps anything thrown in a request to a catalogued error. */
export function toCairnError(err: unknown): CairnError {
  if (err instanceof CairnError) return err;
  const e = err as { statusCode?: number; code?: string; message?: string; validation?: unknown };
  if (hasZodFastifySchemaValidationErrors(err)) {
    const issues = err.validation.map((v) => ({ field: `${err.validationContext ?? ''}${v.instancePath.replace(/\//g, '.')}`, message: v.message ?? 'invalid' }));
    return new CairnError('INVALID_ARGUMENT', issues.map((i) => `${i.field}: ${i.message}`).join('; '), { issues });
  }
  const byFastifyCode: Record<string, ErrorCode> = {
    FST_ERR_CTP_INVALID_MEDIA_TYPE: 'UNSUPPORTED_MEDIA_TYPE',
    FST_INVALID_MULTIPART_CONTENT_TYPE: 'UNSUPPORTED_MEDIA_TYPE',
    FST_ERR_CTP_BODY_TOO_LARGE: 'REQUEST_TOO_LARGE',
    FST_REQ_FILE_TOO_LARGE: 'DATASET_TOO_LARGE',
    FST_FILES_LIMIT: 'INVALID_ARGUMENT',
    FST_FIELDS_LIMIT: 'INVALID_ARGUMENT',
    FST_PARTS_LIMIT: 'INVALID_ARGUMENT',
    FST_ERR_CTP_INVALID_JSON_BODY: 'INVALID_ARGUMENT',
    FST_ERR_CTP_EMPTY_JSON_BODY: 'INVALID_ARGUMENT',
  };
  const code = e.code ? byFastifyCode[e.code] : undefined;
  if (code) return new CairnError(code, code === 'INVALID_ARGUMENT' ? e.message : undefined);
  if (e.statusCode === 400) return new CairnError('INVALID_ARGUMENT', e.message);
  if (e.statusCode === 503) return new CairnError('SERVICE_SHUTTING_DOWN');
  return new CairnError('INTERNAL_ERROR');
}

import { createReadStream } from 'node:fs';
import { readFile } from 'node:fs/promises';
import { join } from 'node:path';
import { Readable } from 'node:stream';
import { z } from 'zod';
import { CairnError } from '../errors.js';
import { assignmentRows } from '../jobs/assignment-export.js';
import type { ResultDocument } from '../jobs/result-document.js';
import type { SelectSpec, TaskRef } from '../jobs/task.js';
import { isFinal } from '../jobs/task.js';
import { renderContactSheet } from '../report/contact-sheet.js';
import type { App, RouteDeps } from './app.js';
import { idempotencyKey } from './dataset-routes.js';
import type { EventStreams } from './event-streams.js';
import { fingerprintOf } from './idempotency.js';
import { datasetView, JSON_TYPE, jobBody, jobView } from './resources.js';
import { assignmentsQuery, contactSheetQuery, createJobBody, errorBody, idParams, jobListQuery, jobResource } from './schemas.js';
import { newId } from './task-ids.js';
import { EmbeddingCache, embeddingCacheKey } from '../jobs/embedding-cache.js';
import { removeJob, shardRanges } from '../jobs/job-files.js';

const errors = { 400: errorBody, 401: errorBody, 404: errorBody, 409: errorBody, 422: errorBody, 429: errorBody };

export function jobRoutes(app: App, deps: RouteDeps, streams: EventStreams): void {
  const { store, queue, idempotency, reader } = deps;
  const ref = (tenant: string, id: string): TaskRef => ({ kind: 'job', tenant, id });
  const existing = async (tenant: string, id: string): Promise<TaskRef> => {
    const r = ref(tenant, id);
    if (!(await store.exists(r))) throw new CairnError('JOB_NOT_FOUND', undefined, { jobId: id });
    return r;
  };
  const completed = async (tenant: string, id: string): Promise<{ r: TaskRef; spec: SelectSpec }> => {
    const r = await existing(tenant, id);
    const state = await store.readState(r);
    if (state.status !== 'completed') throw new CairnError('JOB_NOT_COMPLETED', `The job is ${state.status}.`, { jobId: id, status: state.status });
    return { r, spec: await store.readSpec<SelectSpec>(r) };
  };
  /** Cancels the job and its embedding shards (queued ones at once; running ones see their markers). */
  const cancelJob = async (r: TaskRef): Promise<void> => {
    const spec = await store.readSpec<SelectSpec>(r);
    await store.requestCancel(r);
    for (const sh of spec.embedding?.shards ?? []) {
      const child: TaskRef = { kind: 'embed', tenant: r.tenant, id: sh.id };
      const s = await store.readState(child).catch(() => null);
      if (s && !isFinal(s.status)) {
        await store.requestCancel(child);
        await queue.cancel(child);
      }
    }
    await queue.cancel(r);
  };
  const readResult = async (r: TaskRef): Promise<ResultDocument> => JSON.parse(await store.readText(r, 'result.json')) as ResultDocument;

  app.post(
    '/v1/jobs',
    {
      schema: {
        summary: 'Create a selection job',
        description: 'Queues a selection of k representatives of a dataset whose ingestion has completed. Every option has a documented default; the job stores the options with defaults filled in.',
        tags: ['jobs'],
        body: createJobBody,
        response: { 202: jobResource, ...errors },
      },
    },
    async (req, reply) => {
      const tenant = req.tenant;
      const { datasetId, name, embedding: wanted, fixed: fixedIn, previous, ...options } = req.body;
      const create = async () => {
        const dsRef: TaskRef = { kind: 'dataset', tenant, id: datasetId };
        if (!(await store.exists(dsRef))) throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId });
        const ds = await datasetView(reader, dsRef);
        if (ds.status !== 'completed' || ds.rows === null) throw new CairnError('DATASET_NOT_READY', `The dataset is ${ds.status}.`, { datasetId, status: ds.status });
        if (options.k > ds.rows) throw new CairnError('K_TOO_LARGE', `k = ${options.k} but the dataset has ${ds.rows} rows.`, { k: options.k, rows: ds.rows });
        let cols = ds.cols!;
        const id = newId('job');
        let embedding: SelectSpec['embedding'];
        const children: TaskRef[] = [];
        if (wanted) {
          const model = deps.models.get(wanted.model);
          if (!ds.hasImages) throw new CairnError('DATASET_NOT_IMAGES', undefined, { datasetId });
          const normalize = wanted.normalize ?? model.description.normalize;
          const cacheKey = embeddingCacheKey(model.sha256, model.description, normalize);
          const cached = await new EmbeddingCache(join(store.embeddingsDir(tenant, datasetId), cacheKey)).meta();
          const choice = { model: model.name, modelSha256: model.sha256, normalize, cacheKey };
          // Shards only for an embedding not cached yet: each a child task any worker can run.
          const ranges = cached ? [] : shardRanges(ds.rows, deps.config.CAIRN_EMBED_SHARD_ROWS);
          const shards = ranges.map((rg) => ({ id: `${id}-e${rg.start}`, ...rg }));
          embedding = { ...choice, shards };
          cols = model.description.output.dim;
        }
        const pca = /^pca:(\d+)$/.exec(options.space);
        if (pca && Number(pca[1]) > cols) throw new CairnError('INVALID_ARGUMENT', `space pca:${pca[1]} asks for more axes than the ${cols} dimensions of the vectors.`, { name: 'space', value: options.space });
        const fixed = fixedIn ? { ids: fixedIn.ids, datasetId: fixedIn.datasetId ?? datasetId } : undefined;
        if (fixed && fixed.datasetId !== datasetId) {
          const other = await datasetView(reader, { kind: 'dataset', tenant, id: fixed.datasetId }).catch(() => {
            throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId: fixed.datasetId });
          });
          if (other.status !== 'completed') throw new CairnError('DATASET_NOT_READY', `The fixed items' dataset is ${other.status}.`, { datasetId: fixed.datasetId, status: other.status });
          if (embedding && !other.hasImages) throw new CairnError('DATASET_NOT_IMAGES', "An embedding job's fixed items must be images.", { datasetId: fixed.datasetId });
          if (!embedding && other.cols !== ds.cols) throw new CairnError('DIMENSION_MISMATCH', `The fixed items' dataset has ${other.cols} columns, the job's ${ds.cols}.`, { expected: ds.cols, got: other.cols });
        }
        if (previous) {
          const earlier = await jobView(reader, ref(tenant, previous.jobId));
          if (earlier.status !== 'completed') throw new CairnError('JOB_NOT_COMPLETED', `The earlier job is ${earlier.status}.`, { jobId: previous.jobId, status: earlier.status });
        }
        // Every check has passed: only now the shard tasks and the job are written.
        for (const sh of embedding?.shards ?? []) {
          const child: TaskRef = { kind: 'embed', tenant, id: sh.id };
          const { shards: _all, ...choice } = embedding!;
          await store.create(child, { kind: 'embed', datasetId, parentJobId: id, embedding: choice, start: sh.start, count: sh.count, createdAt: new Date().toISOString() });
          children.push(child);
        }
        const r = ref(tenant, id);
        const spec: SelectSpec = { kind: 'job', datasetId, options, name, ...(embedding ? { embedding } : {}), ...(fixed ? { fixed } : {}), ...(previous ? { previous } : {}), createdAt: new Date().toISOString() };
        await store.create(r, spec);
        await queue.enqueue(r, children);
        return { status: 202, body: await jobView(reader, r) };
      };
      const key = idempotencyKey(req.headers['idempotency-key']);
      const answer = key ? await idempotency.run(tenant, key, fingerprintOf(req.body), create) : await create();
      return reply.status(answer.status).send(answer.body as z.infer<typeof jobResource>);
    },
  );

  app.get('/v1/jobs', { schema: { summary: 'List selection jobs', tags: ['jobs'], querystring: jobListQuery, response: { 200: z.object({ jobs: z.array(jobResource) }), ...errors } } }, async (req) => {
    const q = req.query;
    const views = await Promise.all((await store.list(req.tenant, 'job')).map((id) => jobView(reader, ref(req.tenant, id)).catch(() => null)));
    const jobs = views
      .filter((v): v is NonNullable<typeof v> => v !== null && (!q.status || v.status === q.status) && (!q.datasetId || v.datasetId === q.datasetId))
      .sort((a, b) => b.createdAt.localeCompare(a.createdAt))
      .slice(0, q.limit);
    return { jobs };
  });

  app.get('/v1/jobs/:id', { schema: { summary: 'Get a job (status and progress)', tags: ['jobs'], params: idParams, response: { 200: jobResource, ...errors } } }, async (req, reply) => {
    // No separate existence check: reading the spec answers JOB_NOT_FOUND for a missing job. The
    // body comes serialized from the reader's cache (what dashboards poll), so it skips the serializer.
    return reply.type(JSON_TYPE).send((await jobBody(reader, ref(req.tenant, req.params.id))) as never);
  });

  app.get(
    '/v1/jobs/:id/events',
    { schema: { summary: 'Follow a job (Server-Sent Events)', description: '`state` events carry the job resource (status, progress with phase, iteration, loss estimate and ETA); an `end` event follows the final state, then the stream closes.', tags: ['jobs'], params: idParams, produces: ['text/event-stream'] } },
    async (req, reply) => {
      const r = await existing(req.tenant, req.params.id);
      await streams.stream(req, reply, r, () => jobView(reader, r));
    },
  );

  app.post('/v1/jobs/:id/cancel', { schema: { summary: 'Cancel a job', description: 'A queued job is cancelled at once; a running one stops within about a second. Answers the job as it is now.', tags: ['jobs'], params: idParams, response: { 202: jobResource, ...errors } } }, async (req, reply) => {
    const r = await existing(req.tenant, req.params.id);
    const state = await store.readState(r);
    if (isFinal(state.status)) throw new CairnError('JOB_FINISHED', `The job is ${state.status}.`, { jobId: r.id, status: state.status });
    await cancelJob(r);
    return reply.status(202).send(await jobView(reader, r));
  });

  app.delete('/v1/jobs/:id', { schema: { summary: 'Delete a job', description: 'Cancels it if needed and deletes its record, checkpoint, result and assignments.', tags: ['jobs'], params: idParams, response: { 204: z.null(), ...errors } } }, async (req, reply) => {
    const r = await existing(req.tenant, req.params.id);
    const state = await store.readState(r);
    if (!isFinal(state.status)) await cancelJob(r);
    await removeJob(store, r);
    reader.forget(r);
    return reply.status(204).send(null);
  });

  app.get(
    '/v1/jobs/:id/result',
    { schema: { summary: 'The result of a completed job', description: 'Representatives in rank order (id, index, weight, share, radius, label histogram), coverage, D² against random k-subsets, the prefix curve and the trace; documented in docs/result.md.', tags: ['jobs'], params: idParams, response: { 200: z.record(z.string(), z.unknown()), ...errors } } },
    async (req, reply) => {
      const { r } = await completed(req.tenant, req.params.id);
      // Sent as stored: the document can be large and was validated when written.
      return reply.type('application/json').serializer((x: unknown) => x as string).send(createReadStream(store.file(r, 'result.json')) as never);
    },
  );

  app.get(
    '/v1/jobs/:id/assignments',
    { schema: { summary: 'Every item’s nearest representative (streamed)', description: 'One record per item in dataset order: id, index, rank and id of its nearest representative, and the distance in the selection space. ndjson (default) or csv.', tags: ['jobs'], params: idParams, querystring: assignmentsQuery, produces: ['application/x-ndjson', 'text/csv'] } },
    async (req, reply) => {
      const { r, spec } = await completed(req.tenant, req.params.id);
      const result = await readResult(r);
      const repIds = result.representatives.map((p) => p.id);
      const dsDir = join(store.storeDir(req.tenant), spec.datasetId);
      await readFile(join(dsDir, 'meta.json')).catch(() => {
        throw new CairnError('DATASET_NOT_FOUND', 'The job’s dataset has been deleted, so its item ids are gone.', { datasetId: spec.datasetId });
      });
      const format = req.query.format;
      const fixedIds = (result.fixed ?? []).map((x) => x.id);
      const body = Readable.from(assignmentRows(join(dsDir, 'items.jsonl'), store.file(r, 'assignments.bin'), result.rows, repIds, format, fixedIds));
      return reply
        .type(format === 'csv' ? 'text/csv; charset=utf-8' : 'application/x-ndjson')
        .header('content-disposition', `attachment; filename="${r.id}-assignments.${format === 'csv' ? 'csv' : 'ndjson'}"`)
        .send(body);
    },
  );

  app.get(
    '/v1/jobs/:id/contact-sheet.png',
    { schema: { summary: 'Contact sheet of the representatives (image datasets)', description: 'A PNG grid of the first `limit` representatives by rank, captioned with rank and weight.', tags: ['jobs'], params: idParams, querystring: contactSheetQuery, produces: ['image/png'] } },
    async (req, reply) => {
      const { r, spec } = await completed(req.tenant, req.params.id);
      const thumbs = join(store.storeDir(req.tenant), spec.datasetId, 'thumbs');
      const ds = await datasetView(reader, { kind: 'dataset', tenant: req.tenant, id: spec.datasetId }).catch(() => null);
      if (!ds || ds.hasImages === null) throw new CairnError('DATASET_NOT_FOUND', 'The job’s dataset has been deleted.', { datasetId: spec.datasetId });
      if (!ds.hasImages) throw new CairnError('DATASET_HAS_NO_IMAGES', undefined, { datasetId: spec.datasetId });
      const reps = (await readResult(r)).representatives.slice(0, req.query.limit);
      const cells = await Promise.all(reps.map(async (p) => ({ png: await readFile(join(thumbs, `${p.index}.png`)).catch(() => null), rank: p.rank, weight: p.weight })));
      const png = await renderContactSheet(cells, { columns: req.query.columns, cellSize: req.query.cellSize });
      return reply.type('image/png').header('cache-control', 'private, max-age=3600').send(png);
    },
  );
}

import { createHash } from 'node:crypto';
import { createWriteStream } from 'node:fs';
import { mkdir, rm } from 'node:fs/promises';
import { join } from 'node:path';
import { Transform } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import type { MultipartFile } from '@fastify/multipart';
import { z } from 'zod';
import { deleteDataset } from '../data/dataset-store.js';
import { CairnError } from '../errors.js';
import type { IngestSpec, TaskRef } from '../jobs/task.js';
import { isFinal } from '../jobs/task.js';
import type { App, RouteDeps } from './app.js';
import type { EventStreams } from './event-streams.js';
import { fingerprintOf } from './idempotency.js';
import { datasetBody, datasetView, JSON_TYPE, jobView } from './resources.js';
import { datasetResource, errorBody, idParams, listQuery, uploadFields } from './schemas.js';
import { newId } from './task-ids.js';

const errors = { 400: errorBody, 401: errorBody, 404: errorBody, 409: errorBody, 413: errorBody, 415: errorBody, 422: errorBody, 429: errorBody };

export function datasetRoutes(app: App, deps: RouteDeps, streams: EventStreams): void {
  const { store, queue, idempotency, metrics, reader } = deps;
  const ref = (tenant: string, id: string): TaskRef => ({ kind: 'dataset', tenant, id });
  const existing = async (tenant: string, id: string): Promise<TaskRef> => {
    const r = ref(tenant, id);
    if (!(await store.exists(r))) throw new CairnError('DATASET_NOT_FOUND', undefined, { datasetId: id });
    return r;
  };

  app.post(
    '/v1/datasets',
    {
      schema: {
        summary: 'Upload a dataset',
        description:
          'multipart/form-data with one file part named `file` (.npy, CSV, TSV, JSON Lines, Parquet, or a zip / tar / tar.gz of PNG and JPEG images) and optional text fields: ' +
          '`name`, `format` (default: detected), `idField`, `labelField`, `vectorField`, `nonFinite` (fail | drop), `imageSize`, `imageColor` (gray | rgb). ' +
          'The file is streamed to disk and ingested by a queued task: poll the dataset (or its events) until `status` is `completed`. ' +
          'A file over the configured upload limit is refused with DATASET_TOO_LARGE; nothing of it is kept.',
        tags: ['datasets'],
        consumes: ['multipart/form-data'],
        response: { 202: datasetResource, ...errors },
      },
    },
    async (req, reply) => {
      if (!req.isMultipart()) throw new CairnError('UNSUPPORTED_MEDIA_TYPE', 'Send the dataset as multipart/form-data with a part named "file".');
      const tenant = req.tenant;
      await mkdir(store.uploadsDir(), { recursive: true });
      const uploadPath = join(store.uploadsDir(), `${newId('ds')}.upload`);
      const fields: Record<string, string> = {};
      let file: { name: string; bytes: number; sha256: string } | null = null;
      try {
        for await (const part of req.parts()) {
          if (part.type === 'field') {
            if (typeof part.value === 'string') fields[part.fieldname] = part.value;
            continue;
          }
          if (part.fieldname !== 'file' || file) {
            part.file.resume();
            throw new CairnError('INVALID_ARGUMENT', 'Send exactly one file part, named "file".', { part: part.fieldname });
          }
          file = await receive(part, uploadPath);
          metrics.uploadBytes.inc(file.bytes);
          if (part.file.truncated) throw new CairnError('DATASET_TOO_LARGE', undefined, { limitBytes: deps.config.CAIRN_MAX_UPLOAD_BYTES });
        }
        if (!file) throw new CairnError('UPLOAD_NO_FILE');
        const parsed = uploadFields.safeParse(fields);
        if (!parsed.success) {
          const issues = parsed.error.issues.map((i) => ({ field: i.path.join('.'), message: i.message }));
          throw new CairnError('INVALID_ARGUMENT', issues.map((i) => `${i.field}: ${i.message}`).join('; '), { issues });
        }
        const f = parsed.data;
        const received = file;
        const create = async () => {
          const id = newId('ds');
          const spec: IngestSpec = {
            kind: 'dataset',
            sourceName: received.name,
            sourceBytes: received.bytes,
            format: f.format,
            name: f.name,
            read: {
              idField: f.idField,
              labelField: f.labelField,
              vectorField: f.vectorField,
              nonFinite: f.nonFinite,
              image: { size: f.imageSize, color: f.imageColor },
            },
            createdAt: new Date().toISOString(),
          };
          const r = ref(tenant, id);
          await store.create(r, spec, { source: uploadPath });
          await queue.enqueue(r);
          return { status: 202, body: await datasetView(reader, r) };
        };
        const key = idempotencyKey(req.headers['idempotency-key']);
        const answer = key ? await idempotency.run(tenant, key, fingerprintOf({ sha256: received.sha256, name: received.name, fields: f }), create) : await create();
        return reply.status(answer.status).send(answer.body as z.infer<typeof datasetResource>);
      } finally {
        // Moved into the task on success; anything left here is a refused or repeated upload.
        await rm(uploadPath, { force: true });
      }
    },
  );

  app.get('/v1/datasets', { schema: { summary: 'List datasets', tags: ['datasets'], querystring: listQuery, response: { 200: z.object({ datasets: z.array(datasetResource) }), ...errors } } }, async (req) => {
    const views = await Promise.all((await store.list(req.tenant, 'dataset')).map((id) => datasetView(reader, ref(req.tenant, id)).catch(() => null)));
    const datasets = views
      .filter((v): v is NonNullable<typeof v> => v !== null && (!req.query.status || v.status === req.query.status))
      .sort((a, b) => b.createdAt.localeCompare(a.createdAt))
      .slice(0, req.query.limit);
    return { datasets };
  });

  app.get('/v1/datasets/:id', { schema: { summary: 'Get a dataset', tags: ['datasets'], params: idParams, response: { 200: datasetResource, ...errors } } }, async (req, reply) => {
    return reply.type(JSON_TYPE).send((await datasetBody(reader, ref(req.tenant, req.params.id))) as never);
  });

  app.get(
    '/v1/datasets/:id/events',
    { schema: { summary: 'Follow a dataset’s ingestion (Server-Sent Events)', description: '`state` events carry the dataset resource; an `end` event follows the final state, then the stream closes.', tags: ['datasets'], params: idParams, produces: ['text/event-stream'] } },
    async (req, reply) => {
      const r = await existing(req.tenant, req.params.id);
      await streams.stream(req, reply, r, () => datasetView(reader, r));
    },
  );

  app.delete(
    '/v1/datasets/:id',
    { schema: { summary: 'Delete a dataset', description: 'Deletes the upload, the stored dataset and its ingestion record at once. Refused while selection jobs on it are queued or running. Finished jobs keep their results.', tags: ['datasets'], params: idParams, response: { 204: z.null(), ...errors } } },
    async (req, reply) => {
      const r = await existing(req.tenant, req.params.id);
      for (const jobId of await store.list(req.tenant, 'job')) {
        const job = await jobView(reader, { kind: 'job', tenant: req.tenant, id: jobId }).catch(() => null);
        if (job && job.datasetId === r.id && !isFinal(job.status)) throw new CairnError('DATASET_IN_USE', undefined, { jobId });
      }
      const state = await store.readState(r);
      if (!isFinal(state.status)) {
        await store.requestCancel(r);
        await queue.cancel(r);
      }
      await store.remove(r);
      reader.forget(r);
      await deleteDataset(store.storeDir(req.tenant), r.id).catch((err: unknown) => {
        if (!(err instanceof CairnError && err.code === 'DATASET_NOT_FOUND')) throw err;
      });
      await rm(store.embeddingsDir(req.tenant, r.id), { recursive: true, force: true });
      return reply.status(204).send(null);
    },
  );
}

/** Streams one file part to disk, hashing it on the way. */
async function receive(part: MultipartFile, path: string): Promise<{ name: string; bytes: number; sha256: string }> {
  const hash = createHash('sha256');
  let bytes = 0;
  const tap = new Transform({
    transform(chunk: Buffer, _enc, done) {
      hash.update(chunk);
      bytes += chunk.length;
      done(null, chunk);
    },
  });
  await pipeline(part.file, tap, createWriteStream(path, { flags: 'wx' }));
  // Only the last path segment, and never empty: it is shown back and used to recognise the format.
  const name = (part.filename || 'upload').split(/[\\/]/).pop()!.slice(0, 255) || 'upload';
  return { name, bytes, sha256: hash.digest('hex') };
}

export function idempotencyKey(header: string | string[] | undefined): string | null {
  if (header === undefined) return null;
  const key = Array.isArray(header) ? header[0] : header;
  if (!key || key.length > 255) throw new CairnError('INVALID_ARGUMENT', 'Idempotency-Key must be 1–255 characters.', { name: 'Idempotency-Key' });
  return key;
}

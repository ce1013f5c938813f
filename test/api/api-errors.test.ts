import { readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { ERROR_CATALOGUE, type ErrorCode } from '../../src/errors.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { settle, testServer, type TestServer } from './api-helpers.js';

/** Asserts an error answer: the catalogued status and the `{error: {code, message, details}}` shape. */
function expectError(res: request.Response, code: ErrorCode): void {
  expect({ status: res.status, code: res.body?.error?.code }).toEqual({ status: ERROR_CATALOGUE[code].status, code });
  expect(typeof res.body.error.message).toBe('string');
  expect(typeof res.body.error.details).toBe('object');
}

/** Every catalogued error the API itself can answer, each from a request that causes it. */
describe('API errors', () => {
  let t: TestServer;
  let url: string;
  let ready: string;
  let failed: string;

  beforeAll(async () => {
    t = await testServer({ CAIRN_MAX_UPLOAD_BYTES: '200000' });
    url = t.server.url;
    const ok = await request(url).post('/v1/datasets').attach('file', npyOf(clusterMatrix(1000, 1)), 'points.npy');
    ready = ok.body.id;
    const bad = await request(url).post('/v1/datasets').attach('file', Buffer.from('\x93NUMPX not really'), 'broken.npy');
    failed = bad.body.id;
    await settle(url, `/v1/datasets/${ready}`);
    await settle(url, `/v1/datasets/${failed}`);
  });
  afterAll(async () => t?.stop());

  it('a file that cannot be read fails its ingestion with the reader’s code', async () => {
    const ds = (await request(url).get(`/v1/datasets/${failed}`)).body;
    expect(ds.status).toBe('failed');
    expect(ds.error.code).toBe('NPY_BAD_MAGIC');
    expect(ds.attempt).toBe(1);
  });

  it('unknown routes, datasets and jobs', async () => {
    expectError(await request(url).get('/v1/nothing-here'), 'ROUTE_NOT_FOUND');
    expectError(await request(url).get('/v1/datasets/ds_0000000000000000'), 'DATASET_NOT_FOUND');
    expectError(await request(url).delete('/v1/datasets/ds_0000000000000000'), 'DATASET_NOT_FOUND');
    expectError(await request(url).get('/v1/jobs/job_0000000000000000'), 'JOB_NOT_FOUND');
    expectError(await request(url).post('/v1/jobs').send({ datasetId: 'ds_0000000000000000', k: 2 }), 'DATASET_NOT_FOUND');
  });

  it('bad options and ids name the field', async () => {
    const res = await request(url).post('/v1/jobs').send({ datasetId: ready, k: 0 });
    expectError(res, 'INVALID_ARGUMENT');
    expect(JSON.stringify(res.body.error.details)).toContain('k');
    expectError(await request(url).post('/v1/jobs').send({ datasetId: ready, k: 2, kernel: 'cosine' }), 'INVALID_ARGUMENT');
    expectError(await request(url).get('/v1/jobs?limit=0'), 'INVALID_ARGUMENT');
    expectError(await request(url).get('/v1/jobs/..%2F..%2Fetc'), 'INVALID_ARGUMENT');
    expectError(await request(url).post('/v1/jobs').send({ datasetId: ready, k: 2, space: 'pca:50' }), 'INVALID_ARGUMENT');
    expectError(await request(url).post('/v1/jobs').set('content-type', 'application/json').send('{"k": 2,'), 'INVALID_ARGUMENT');
  });

  it('k larger than the dataset, and a dataset that is not ingested', async () => {
    expectError(await request(url).post('/v1/jobs').send({ datasetId: ready, k: 1001 }), 'K_TOO_LARGE');
    expectError(await request(url).post('/v1/jobs').send({ datasetId: failed, k: 2 }), 'DATASET_NOT_READY');
  });

  it('uploads: wrong content type, no file part, over the size limit (nothing kept)', async () => {
    expectError(await request(url).post('/v1/datasets').send({ file: 'x' }), 'UNSUPPORTED_MEDIA_TYPE');
    expectError(await request(url).post('/v1/jobs').set('content-type', 'application/xml').send('<k>2</k>'), 'UNSUPPORTED_MEDIA_TYPE');
    expectError(await request(url).post('/v1/datasets').field('name', 'no file'), 'UPLOAD_NO_FILE');
    expectError(await request(url).post('/v1/datasets').attach('file', Buffer.alloc(300_000, 1), 'big.npy'), 'DATASET_TOO_LARGE');
    expect(readdirSync(join(t.dir, 'uploads'))).toEqual([]);
    expectError(await request(url).post('/v1/datasets').attach('file', npyOf(clusterMatrix(10, 1)), 'a.npy').field('format', 'xls'), 'INVALID_ARGUMENT');
    expect(readdirSync(join(t.dir, 'uploads'))).toEqual([]);
  });

  it('a JSON body over 1 MiB', async () => {
    expectError(await request(url).post('/v1/jobs').send({ datasetId: ready, k: 2, name: 'x'.repeat(2_000_000) }), 'REQUEST_TOO_LARGE');
  });

  it('results of unfinished jobs, cancelling finished ones, deleting datasets in use, contact sheets of vectors', async () => {
    const job = (await request(url).post('/v1/jobs').send({ datasetId: ready, k: 4, maxIterations: 1_000_000, plateauTolerance: 0 })).body;
    expectError(await request(url).get(`/v1/jobs/${job.id}/result`), 'JOB_NOT_COMPLETED');
    expectError(await request(url).get(`/v1/jobs/${job.id}/assignments`), 'JOB_NOT_COMPLETED');
    expectError(await request(url).delete(`/v1/datasets/${ready}`), 'DATASET_IN_USE');
    const cancel = await request(url).post(`/v1/jobs/${job.id}/cancel`);
    expect(cancel.status).toBe(202);
    const final = await settle(url, `/v1/jobs/${job.id}`);
    expect(final.status).toBe('cancelled');
    expect((final.error as { code: string }).code).toBe('SELECTION_CANCELLED');
    expectError(await request(url).post(`/v1/jobs/${job.id}/cancel`), 'JOB_FINISHED');

    const done = (await request(url).post('/v1/jobs').send({ datasetId: ready, k: 2, maxIterations: 50 })).body;
    await settle(url, `/v1/jobs/${done.id}`);
    expectError(await request(url).get(`/v1/jobs/${done.id}/contact-sheet.png`), 'DATASET_HAS_NO_IMAGES');
  });

  it('a damaged record answers INTERNAL_ERROR without leaking its text', async () => {
    const job = (await request(url).post('/v1/jobs').send({ datasetId: ready, k: 2, maxIterations: 50 })).body;
    await settle(url, `/v1/jobs/${job.id}`);
    writeFileSync(join(t.dir, 'tenants', 'local', 'job', job.id, 'state.json'), '{"status": "comp');
    // The API reuses a state read for 250 ms (src/api/task-reader.ts).
    await new Promise((r) => setTimeout(r, 300));
    const res = await request(url).get(`/v1/jobs/${job.id}`);
    expectError(res, 'INTERNAL_ERROR');
    expect(res.body.error.message).toBe(ERROR_CATALOGUE.INTERNAL_ERROR.message);
  });

  it('deletes a job and a dataset: they answer 404 afterwards', async () => {
    const job = (await request(url).post('/v1/jobs').send({ datasetId: ready, k: 2, maxIterations: 50 })).body;
    await settle(url, `/v1/jobs/${job.id}`);
    expect((await request(url).delete(`/v1/jobs/${job.id}`)).status).toBe(204);
    expectError(await request(url).get(`/v1/jobs/${job.id}`), 'JOB_NOT_FOUND');
    expect((await request(url).delete(`/v1/datasets/${failed}`)).status).toBe(204);
    expectError(await request(url).get(`/v1/datasets/${failed}`), 'DATASET_NOT_FOUND');
  });
});

describe('API limits and shutdown', () => {
  it('answers RATE_LIMITED with Retry-After once a client exceeds its requests per minute; probes are not limited', async () => {
    const t = await testServer({ CAIRN_RATE_LIMIT_PER_MINUTE: '3' });
    try {
      for (let i = 0; i < 3; i++) expect((await request(t.server.url).get('/v1/datasets')).status).toBe(200);
      const res = await request(t.server.url).get('/v1/datasets');
      expectError(res, 'RATE_LIMITED');
      expect(Number(res.headers['retry-after'])).toBeGreaterThan(0);
      for (let i = 0; i < 5; i++) expect((await request(t.server.url).get('/healthz')).status).toBe(200);
    } finally {
      await t.stop();
    }
  });

  it('answers SERVICE_SHUTTING_DOWN to requests that arrive while it closes', async () => {
    const t = await testServer();
    const stopping = t.stop();
    const res = await t.server.app.inject({ method: 'GET', url: '/v1/datasets' });
    expect(res.statusCode).toBe(503);
    expect(res.json().error.code).toBe('SERVICE_SHUTTING_DOWN');
    await stopping;
  });
});

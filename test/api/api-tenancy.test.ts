import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { hashApiKey } from '../../src/api/auth.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { settle, testServer, type TestServer } from './api-helpers.js';

const keyA = 'cairn_test-key-of-tenant-a-0123456789abcdef';
const keyB = 'cairn_test-key-of-tenant-b-0123456789abcdef';
const A = { authorization: `Bearer ${keyA}` };
const B = { authorization: `Bearer ${keyB}` };

describe('API keys and tenants', () => {
  let t: TestServer;
  let url: string;
  let datasetId: string;
  let jobId: string;

  beforeAll(async () => {
    t = await testServer({ CAIRN_API_KEYS: `north-yard:${hashApiKey(keyA)}, south-yard:${hashApiKey(keyB)}`, CAIRN_HOST: '127.0.0.1' });
    url = t.server.url;
    datasetId = (await request(url).post('/v1/datasets').set(A).attach('file', npyOf(clusterMatrix(500, 2)), 'a.npy')).body.id;
    await settle(url, `/v1/datasets/${datasetId}`, A);
    jobId = (await request(url).post('/v1/jobs').set(A).send({ datasetId, k: 3, maxIterations: 50 })).body.id;
    await settle(url, `/v1/jobs/${jobId}`, A);
  });
  afterAll(async () => t?.stop());

  it('refuses requests without a key or with an unknown one; probes need none', async () => {
    for (const headers of [{}, { authorization: 'Bearer not-a-key' }, { authorization: keyA }]) {
      const res = await request(url).get('/v1/datasets').set(headers);
      expect(res.status).toBe(401);
      expect(res.body.error.code).toBe('UNAUTHORIZED');
    }
    expect((await request(url).get('/healthz')).status).toBe(200);
    expect((await request(url).get('/readyz')).body).toMatchObject({ status: 'ready', checks: { queue: true, disk: true }, queue: 'embedded' });
  });

  it('tenant B cannot see, use or delete tenant A’s dataset and job: they answer 404', async () => {
    expect((await request(url).get(`/v1/datasets/${datasetId}`).set(A)).status).toBe(200);
    for (const [method, path] of [
      ['get', `/v1/datasets/${datasetId}`],
      ['get', `/v1/datasets/${datasetId}/events`],
      ['delete', `/v1/datasets/${datasetId}`],
      ['get', `/v1/jobs/${jobId}`],
      ['get', `/v1/jobs/${jobId}/result`],
      ['get', `/v1/jobs/${jobId}/assignments`],
      ['post', `/v1/jobs/${jobId}/cancel`],
      ['delete', `/v1/jobs/${jobId}`],
    ] as const) {
      const res = await request(url)[method](path).set(B);
      expect({ path, method, status: res.status }).toEqual({ path, method, status: 404 });
      expect(res.body.error.code).toMatch(/^(DATASET|JOB)_NOT_FOUND$/);
    }
    const res = await request(url).post('/v1/jobs').set(B).send({ datasetId, k: 2 });
    expect(res.status).toBe(404);
    expect(res.body.error.code).toBe('DATASET_NOT_FOUND');
    expect((await request(url).get('/v1/datasets').set(B)).body.datasets).toEqual([]);
    expect((await request(url).get('/v1/jobs').set(B)).body.jobs).toEqual([]);
    // Still there for A.
    expect((await request(url).get(`/v1/jobs/${jobId}/result`).set(A)).status).toBe(200);
  });

  it('a repeated Idempotency-Key returns the first answer; the same key with another request is refused', async () => {
    const body = { datasetId, k: 2, maxIterations: 40 };
    const first = await request(url).post('/v1/jobs').set(A).set('idempotency-key', 'nightly-2026-12-02').send(body);
    const again = await request(url).post('/v1/jobs').set(A).set('idempotency-key', 'nightly-2026-12-02').send(body);
    expect(first.status).toBe(202);
    expect(again.status).toBe(202);
    expect(again.body).toEqual(first.body);
    const jobs = (await request(url).get(`/v1/jobs?datasetId=${datasetId}`).set(A)).body.jobs as Array<{ id: string }>;
    expect(jobs.filter((j) => j.id === first.body.id)).toHaveLength(1);
    expect(jobs).toHaveLength(2);
    const other = await request(url).post('/v1/jobs').set(A).set('idempotency-key', 'nightly-2026-12-02').send({ ...body, k: 3 });
    expect(other.status).toBe(422);
    expect(other.body.error.code).toBe('IDEMPOTENCY_KEY_REUSED');
    // Keys are per tenant: B's same key is a different request space (B's dataset lookup fails as usual).
    expect((await request(url).post('/v1/jobs').set(B).set('idempotency-key', 'nightly-2026-12-02').send(body)).status).toBe(404);
  });

  it('concurrent uploads with one Idempotency-Key create one dataset', async () => {
    const file = npyOf(clusterMatrix(200, 5));
    const send = () => request(url).post('/v1/datasets').set(A).set('idempotency-key', 'upload-7').attach('file', file, 'b.npy');
    const [r1, r2] = await Promise.all([send(), send()]);
    expect(r1.status).toBe(202);
    expect(r2.body.id).toBe(r1.body.id);
    const r3 = await send();
    expect(r3.body.id).toBe(r1.body.id);
    const ids = ((await request(url).get('/v1/datasets').set(A)).body.datasets as Array<{ id: string }>).map((d) => d.id);
    expect(ids.filter((id) => id === r1.body.id)).toHaveLength(1);
    expect(ids).toHaveLength(2);
  });
});

import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { settle, testServer, type TestServer } from './api-helpers.js';

/** Rows of `base` followed by `extra` (same columns): a dataset's next version, old items keeping their rows (their ids). */
function appended(base: { matrix: Float32Array; rows: number; cols: number }, extra: Float32Array, extraRows: number) {
  const matrix = new Float32Array((base.rows + extraRows) * base.cols);
  matrix.set(base.matrix);
  matrix.set(extra, base.matrix.length);
  return { matrix, rows: base.rows + extraRows, cols: base.cols };
}

/** A new well-separated cluster: 5 on no axis of clusterMatrix's four, 12 on the fifth. */
function newCluster(rows: number, seed: number): Float32Array {
  const rng = new Rng(seed);
  return Float32Array.from({ length: rows * 5 }, (_, i) => (i % 5 === 4 ? 12 : 0) + rng.normal());
}

describe('API: fixed items and stable re-selection', () => {
  let t: TestServer;
  let url: string;
  const v1 = clusterMatrix(4000, 31);
  let ds1: string;
  let week1: ResultDocument;
  let week1Job: string;

  const upload = async (m: { matrix: Float32Array; rows: number; cols: number }, name: string): Promise<string> => {
    const id = (await request(url).post('/v1/datasets').attach('file', npyOf(m), name)).body.id as string;
    expect((await settle(url, `/v1/datasets/${id}`)).status).toBe('completed');
    return id;
  };
  const run = async (body: Record<string, unknown>): Promise<{ job: Record<string, unknown>; result: ResultDocument }> => {
    const created = await request(url).post('/v1/jobs').send(body);
    expect(created.status).toBe(202);
    const job = await settle(url, `/v1/jobs/${created.body.id}`);
    expect(job.status, JSON.stringify(job.error)).toBe('completed');
    return { job, result: (await request(url).get(`/v1/jobs/${created.body.id}/result`)).body as ResultDocument };
  };

  beforeAll(async () => {
    t = await testServer();
    url = t.server.url;
    ds1 = await upload(v1, 'week1.npy');
    const r = await run({ datasetId: ds1, k: 12, seed: 4 });
    week1 = r.result;
    week1Job = r.job.id as string;
  }, 120_000);
  afterAll(async () => t?.stop());

  it('fixed items of the same dataset are kept, reported apart, and the new items cover what they leave uncovered', async () => {
    // Rows 0, 1, 2 lie in clusters 0, 1, 2 (clusterMatrix: cluster = row mod 4); cluster 3 has no fixed item.
    const { result } = await run({ datasetId: ds1, k: 3, seed: 1, fixed: { ids: ['0', '1', '2'] } });
    expect(result.fixed!.map((x) => [x.id, x.index, x.datasetId])).toEqual([
      ['0', 0, ds1],
      ['1', 1, ds1],
      ['2', 2, ds1],
    ]);
    const newIds = result.representatives.map((r) => r.id);
    expect(new Set(newIds).size).toBe(3);
    for (const id of ['0', '1', '2']) expect(newIds).not.toContain(id);
    expect(result.representatives[0].index % 4).toBe(3);
    const weights = [...result.representatives, ...result.fixed!].map((x) => x.weight);
    expect(weights.reduce((a, b) => a + b, 0)).toBeCloseTo(1, 9);
    expect(result.coverageGain!.gain).toBeGreaterThanOrEqual(0);
    expect(result.coverageGain!.withNew).toBeCloseTo(result.discrepancy.value, 12);
    expect(result.coverageGain!.fixedOnly).toBeGreaterThan(result.coverageGain!.withNew);
  });

  it('fixed items from another dataset, and an unknown id failing the job with ITEM_NOT_FOUND', async () => {
    const other = await upload(clusterMatrix(40, 77), 'annotated.npy');
    const { result } = await run({ datasetId: ds1, k: 4, fixed: { ids: ['3', '7'], datasetId: other } });
    expect(result.fixed!.map((x) => [x.id, x.index, x.datasetId])).toEqual([
      ['3', null, other],
      ['7', null, other],
    ]);
    const bad = await request(url).post('/v1/jobs').send({ datasetId: ds1, k: 2, fixed: { ids: ['no-such-item'] } });
    const failed = await settle(url, `/v1/jobs/${bad.body.id}`);
    expect(failed.status).toBe('failed');
    expect((failed.error as { code: string }).code).toBe('ITEM_NOT_FOUND');
  });

  it('a week later, with 5% new items from the same distribution: a stable re-selection keeps ≥ 80% of the representatives, D² within 10% of an unconstrained run', async () => {
    const extra = clusterMatrix(200, 32);
    const ds2 = await upload(appended(v1, extra.matrix, 200), 'week2.npy');
    const { result } = await run({ datasetId: ds2, k: 12, seed: 4, previous: { jobId: week1Job } });
    expect(result.stability!.previous).toBe(12);
    expect(result.stability!.kept / 12).toBeGreaterThanOrEqual(0.8);
    expect(result.stabilityCost!.ratio!).toBeLessThanOrEqual(1.1);
    expect(result.stabilityCost!.previousJobId).toBe(week1Job);
    const kept = result.representatives.filter((r) => week1.representatives.some((w) => w.id === r.id)).length;
    expect(kept).toBe(result.stability!.kept);
  });

  it('a week later, with a new cluster: the stable re-selection gives it representatives', async () => {
    const ds3 = await upload(appended(v1, newCluster(400, 5), 400), 'week3.npy');
    const { result } = await run({ datasetId: ds3, k: 12, seed: 4, previous: { jobId: week1Job } });
    // Rows 4000.. are the new cluster.
    const inNew = result.representatives.filter((r) => r.index >= 4000);
    expect(inNew.length).toBeGreaterThanOrEqual(1);
    expect(inNew.reduce((a, r) => a + r.share, 0)).toBeGreaterThan(0.05);
    expect(result.stability!.added).toBeGreaterThanOrEqual(1);
  });

  it('refuses an earlier job that is not completed', async () => {
    const running = (await request(url).post('/v1/jobs').send({ datasetId: ds1, k: 3, maxIterations: 1_000_000, plateauTolerance: 0 })).body.id;
    const res = await request(url).post('/v1/jobs').send({ datasetId: ds1, k: 3, previous: { jobId: running } });
    expect([res.status, res.body.error.code]).toEqual([409, 'JOB_NOT_COMPLETED']);
    await request(url).post(`/v1/jobs/${running}/cancel`);
  });
});

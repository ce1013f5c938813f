import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { buildTar, png, type Rgb } from '../data/archive-fixtures.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { settle, testServer, type TestServer } from './api-helpers.js';

/** Ranked prefixes and the review batch export. */
describe('API: prefixes and review batches', () => {
  let t: TestServer;
  let url: string;
  let jobId: string;
  let result: ResultDocument;

  beforeAll(async () => {
    t = await testServer();
    url = t.server.url;
    const ds = (await request(url).post('/v1/datasets').attach('file', npyOf(clusterMatrix(4000, 21)), 'points.npy')).body.id;
    await settle(url, `/v1/datasets/${ds}`);
    jobId = (await request(url).post('/v1/jobs').send({ datasetId: ds, k: 24, seed: 2, worstCount: 15 })).body.id;
    expect((await settle(url, `/v1/jobs/${jobId}`)).status).toBe('completed');
    result = (await request(url).get(`/v1/jobs/${jobId}/result`)).body as ResultDocument;
  }, 120_000);
  afterAll(async () => t?.stop());

  it('returns the first m representatives with the prefix curve and the random curve', async () => {
    const res = await request(url).get(`/v1/jobs/${jobId}/prefix?m=5`);
    expect(res.status).toBe(200);
    expect(res.body.m).toBe(5);
    expect(res.body.representatives.map((r: { id: string }) => r.id)).toEqual(result.representatives.slice(0, 5).map((r) => r.id));
    expect(res.body.d2).toBe(result.discrepancy.prefix[4].value);
    expect(res.body.curve).toHaveLength(24);
    const all = await request(url).get(`/v1/jobs/${jobId}/prefix`);
    expect(all.body.m).toBe(24);
    const tooMany = await request(url).get(`/v1/jobs/${jobId}/prefix?m=25`);
    expect([tooMany.status, tooMany.body.error.code]).toEqual([400, 'INVALID_ARGUMENT']);
  });

  it('the prefix D² falls on average as m grows and stays below the random subsets’ curve', async () => {
    const curve = (await request(url).get(`/v1/jobs/${jobId}/prefix`)).body.curve as Array<{ m: number; value: number; random: number }>;
    // Greedy order (own construction, src/core/ordering.ts): each step adds the item that lowers D²
    // most, so the curve falls on average; with uniform 1/m weights single steps may rise a little.
    const steps = curve.slice(1).map((p, i) => p.value - curve[i].value);
    expect(steps.reduce((a, b) => a + b, 0) / steps.length).toBeLessThan(0);
    expect(steps.filter((d) => d > 0).length).toBeLessThanOrEqual(Math.floor(steps.length / 4));
    expect(curve.at(-1)!.value).toBeLessThan(curve[0].value / 4);
    // Below random m-subsets at every m ≥ 2 (at m = 1 both are one item).
    for (const p of curve.slice(1)) expect(p.value).toBeLessThan(p.random);
  });

  it('exports the review batch as JSON and CSV: representatives, then poorly covered items, with reasons', async () => {
    const json = await request(url).get(`/v1/jobs/${jobId}/review-batch?m=10&worst=5`);
    expect(json.status).toBe(200);
    const items = json.body.items as Array<{ reason: string; id: string; rank: number | null; distance: number | null; nearestRank: number | null; thumbnail: string | null }>;
    expect(items).toHaveLength(15);
    expect(items.slice(0, 10).map((i) => [i.reason, i.rank])).toEqual(result.representatives.slice(0, 10).map((r) => ['representative', r.rank]));
    expect(items.slice(10).map((i) => [i.reason, i.id, i.distance, i.nearestRank])).toEqual(result.coverage.worstCovered.slice(0, 5).map((w) => ['poorly covered', w.id, w.distance, w.nearestRank]));
    expect(items.every((i) => i.thumbnail === null)).toBe(true);
    expect(json.body.job).toMatchObject({ id: jobId, k: 24 });

    const csv = await request(url).get(`/v1/jobs/${jobId}/review-batch?format=csv`);
    expect(csv.headers['content-type']).toMatch(/text\/csv/);
    const lines = csv.text.trim().split('\n');
    expect(lines[0]).toBe('reason,id,index,label,rank,weight,share,distance,nearest_rank,thumbnail');
    expect(lines).toHaveLength(1 + 24 + 15);
    expect(lines[1].split(',').slice(0, 3)).toEqual(['representative', result.representatives[0].id, String(result.representatives[0].index)]);
    expect(lines.at(-1)!.startsWith('poorly covered,')).toBe(true);
  });

  it('links thumbnails for image datasets', async () => {
    const colours: Rgb[] = [
      [200, 30, 30],
      [30, 30, 200],
    ];
    const entries = [];
    for (let i = 0; i < 20; i++) entries.push({ name: `c${i % 2}/i${i}.png`, data: await png(16, 16, colours[i % 2]) });
    const ds = (await request(url).post('/v1/datasets').attach('file', await buildTar(entries), 'sw.tar')).body.id;
    await settle(url, `/v1/datasets/${ds}`);
    const job = (await request(url).post('/v1/jobs').send({ datasetId: ds, k: 2, maxIterations: 50 })).body.id;
    await settle(url, `/v1/jobs/${job}`);
    const items = (await request(url).get(`/v1/jobs/${job}/review-batch`)).body.items as Array<{ index: number; thumbnail: string }>;
    for (const it of items) expect(it.thumbnail).toBe(`/v1/jobs/${job}/thumbnails/${it.index}.png`);
  });
});

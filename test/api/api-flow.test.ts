import sharp from 'sharp';
import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { OnnxBackend } from '../../src/compute/onnx-backend.js';
import { DenseRows } from '../../src/core/rows.js';
import { select } from '../../src/core/select.js';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { swatchTar } from '../data/archive-fixtures.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { startBullWorker } from '../../src/jobs/bullmq-worker.js';
import { deleteKeys, testLog, testRedisUrl, uniquePrefix } from '../helpers/queues.js';
import { readEvents, settle, testServer, type TestServer } from './api-helpers.js';

interface Mode {
  name: string;
  start(): Promise<{ t: TestServer; stop(): Promise<void> }>;
}

const modes: Mode[] = [
  {
    name: 'embedded queue',
    async start() {
      const t = await testServer();
      return { t, stop: () => t.stop() };
    },
  },
  {
    name: 'BullMQ on Redis with a worker',
    async start() {
      const redisUrl = testRedisUrl();
      const prefix = uniquePrefix();
      const t = await testServer({ REDIS_URL: redisUrl, CAIRN_QUEUE_PREFIX: prefix });
      const worker = await startBullWorker({ redisUrl, prefix, dataDir: t.dir, concurrency: 1, maxAttempts: 2, computeThreads: 1, checkpointEveryMs: 500, stalledMs: 5000, log: testLog });
      return {
        t,
        async stop() {
          await worker.close(0);
          await t.stop();
          await deleteKeys(redisUrl, prefix);
        },
      };
    },
  },
];

/**
 * The whole path through the HTTP API, in both queue modes: upload → ingestion → selection (with
 * SSE progress) → result (checked against the engine run directly with the same seed) →
 * assignments → contact sheet.
 */
describe.each(modes)('API end to end ($name)', (mode) => {
  let t: TestServer;
  let stop: () => Promise<void>;
  let url: string;
  const data = clusterMatrix(3000, 17);
  const options = { k: 6, seed: 3, maxIterations: 300 };
  let datasetId: string;
  let jobId: string;

  beforeAll(async () => {
    ({ t, stop } = await mode.start());
    url = t.server.url;
  });
  afterAll(async () => stop?.());

  it('ingests an uploaded .npy file', async () => {
    const res = await request(url).post('/v1/datasets').attach('file', npyOf(data), 'parts.npy').field('name', 'line 4 sensors');
    expect(res.status).toBe(202);
    expect(res.body.status).toMatch(/queued|running/);
    expect(res.body.source).toEqual({ name: 'parts.npy', bytes: npyOf(data).length });
    datasetId = res.body.id;
    const ds = await settle(url, `/v1/datasets/${datasetId}`);
    expect(ds).toMatchObject({ status: 'completed', rows: data.rows, cols: data.cols, format: 'npy', name: 'line 4 sensors', hasImages: false });
  });

  it('runs a selection whose events end in completion, and whose result equals the engine’s own for the same seed', async () => {
    const res = await request(url).post('/v1/jobs').send({ datasetId, ...options });
    expect(res.status).toBe(202);
    jobId = res.body.id;
    expect(res.body.options).toMatchObject({ ...options, kernel: 'energy', weights: 'optimized' });
    const events = await readEvents(url, `/v1/jobs/${jobId}/events`);
    expect(events.at(-1)).toEqual({ event: 'end', data: { status: 'completed' } });
    const states = events.filter((e) => e.event === 'state').map((e) => e.data);
    expect(states.at(-1)!.status).toBe('completed');
    expect(states.at(-1)!.summary).toMatchObject({ k: 6 });

    const result = (await request(url).get(`/v1/jobs/${jobId}/result`)).body as ResultDocument;
    expect(result.representatives).toHaveLength(6);
    expect(result.dataset).toMatchObject({ id: datasetId, rows: data.rows, source: 'parts.npy' });

    const backend = await OnnxBackend.create({ threads: 1 });
    try {
      const direct = await select(new DenseRows(Float32Array.from(data.matrix), data.rows, data.cols), options, { backend });
      expect(result.representatives.map((r) => r.index)).toEqual(direct.representatives.map((r) => r.index));
      expect(result.representatives.map((r) => r.id)).toEqual(direct.representatives.map((r) => String(r.index)));
      expect(result.discrepancy.value).toBeCloseTo(direct.discrepancy.value, 12);
    } finally {
      await backend.dispose();
    }
  });

  it('streams progress events during the descent, in order, then a final event', async () => {
    const job = (await request(url).post('/v1/jobs').send({ datasetId, k: 6, maxIterations: 3000, plateauTolerance: 0 })).body;
    const events = await readEvents(url, `/v1/jobs/${job.id}/events`);
    const states = events.filter((e) => e.event === 'state').map((e) => e.data as { status: string; progress: { phase: string; fraction: number; iteration?: number } });
    const descent = states.filter((s) => s.status === 'running' && s.progress.phase === 'descent');
    expect(descent.length).toBeGreaterThanOrEqual(2);
    expect(descent.every((s) => (s.progress.iteration ?? 0) > 0 && s.progress.fraction < 1)).toBe(true);
    const fractions = states.map((s) => s.progress.fraction);
    expect(fractions).toEqual([...fractions].sort((a, b) => a - b));
    expect(states.at(-1)!.status).toBe('completed');
    expect(events.at(-1)).toEqual({ event: 'end', data: { status: 'completed' } });
  });

  it('streams every item’s nearest representative as NDJSON and CSV', async () => {
    const result = (await request(url).get(`/v1/jobs/${jobId}/result`)).body as ResultDocument;
    const nd = await request(url).get(`/v1/jobs/${jobId}/assignments`).buffer(true).parse((res, cb) => {
      let text = '';
      res.on('data', (c: Buffer) => (text += c.toString()));
      res.on('end', () => cb(null, text));
    });
    expect(nd.status).toBe(200);
    expect(nd.headers['content-type']).toMatch(/ndjson/);
    const lines = (nd.body as string).trim().split('\n').map((l) => JSON.parse(l) as { id: string; index: number; rank: number; representativeId: string; distance: number });
    expect(lines).toHaveLength(data.rows);
    expect(lines.map((l) => l.index)).toEqual(Array.from({ length: data.rows }, (_, i) => i));
    const counts = new Array<number>(7).fill(0);
    for (const l of lines) counts[l.rank]++;
    // Shares in the result are the fractions of items assigned to each representative.
    for (const r of result.representatives) expect(counts[r.rank] / data.rows).toBeCloseTo(r.share, 12);
    for (const r of result.representatives) {
      expect(lines[r.index]).toMatchObject({ rank: r.rank, representativeId: r.id });
      expect(lines[r.index].distance).toBeCloseTo(0, 3);
    }

    const csv = await request(url).get(`/v1/jobs/${jobId}/assignments?format=csv`);
    expect(csv.headers['content-type']).toMatch(/text\/csv/);
    const rows = csv.text.trim().split('\n');
    expect(rows[0]).toBe('id,index,rank,representative_id,distance,representative_kind');
    expect(rows).toHaveLength(data.rows + 1);
    expect(rows[1].split(',').slice(0, 4)).toEqual([lines[0].id, '0', String(lines[0].rank), lines[0].representativeId]);
    expect(rows[1].split(',')[5]).toBe('new');
  });

  it('lists the tenant’s datasets and jobs', async () => {
    const ds = await request(url).get('/v1/datasets');
    expect(ds.body.datasets.map((d: { id: string }) => d.id)).toContain(datasetId);
    const jobs = await request(url).get(`/v1/jobs?datasetId=${datasetId}&status=completed`);
    expect(jobs.body.jobs.map((j: { id: string }) => j.id)).toContain(jobId);
    expect(jobs.body.jobs).toHaveLength(2);
  });

  it('reports queue depth, task durations and upload bytes at /metrics', async () => {
    // Queue depth is read at scrape time (from Redis in BullMQ mode). A task's thread or job ends
    // a moment after it records its final state, so the last job may count as active briefly.
    let res = await request(url).get('/metrics');
    for (let i = 0; i < 50 && !/^cairn_queue_tasks\{state="active"\} 0$/m.test(res.text); i++) {
      await new Promise((r) => setTimeout(r, 100));
      res = await request(url).get('/metrics');
    }
    expect(res.status).toBe(200);
    expect(res.text).toMatch(/^cairn_queue_tasks\{state="waiting"\} 0$/m);
    expect(res.text).toMatch(/^cairn_queue_tasks\{state="active"\} 0$/m);
    expect(res.text).toMatch(/^cairn_task_duration_seconds_count\{kind="job",status="completed"\} [1-9]/m);
    expect(res.text).toMatch(/^cairn_task_duration_seconds_count\{kind="dataset",status="completed"\} [1-9]/m);
    const bytes = Number(/^cairn_upload_bytes_total (\d+)/m.exec(res.text)?.[1]);
    expect(bytes).toBeGreaterThanOrEqual(npyOf(data).length);
  });

  it('draws a contact sheet of an image dataset’s representatives', async () => {
    const upload = await request(url).post('/v1/datasets').attach('file', await swatchTar(30), 'parts.tar');
    expect(upload.status).toBe(202);
    const ds = await settle(url, `/v1/datasets/${upload.body.id}`);
    expect(ds).toMatchObject({ status: 'completed', rows: 30, hasImages: true });
    const job = await request(url).post('/v1/jobs').send({ datasetId: upload.body.id, k: 3, maxIterations: 100 });
    expect((await settle(url, `/v1/jobs/${job.body.id}`)).status).toBe('completed');
    const sheet = await request(url).get(`/v1/jobs/${job.body.id}/contact-sheet.png?cellSize=64`).buffer(true);
    expect(sheet.status).toBe(200);
    expect(sheet.headers['content-type']).toBe('image/png');
    const meta = await sharp(sheet.body as Buffer).metadata();
    // 3 cells → 2 columns (⌈√3⌉), 2 rows; layout of src/report/contact-sheet.ts: 4 px padding, 20 px captions.
    expect(meta.width).toBe(2 * 64 + 3 * 4);
    expect(meta.height).toBe(2 * (64 + 20) + 3 * 4);
    // Three clusters of one colour each: three representatives, one per colour.
    const result = (await request(url).get(`/v1/jobs/${job.body.id}/result`)).body as ResultDocument;
    expect(new Set(result.representatives.map((r) => r.index % 3)).size).toBe(3);
  });
});

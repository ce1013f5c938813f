import { existsSync, mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import request from 'supertest';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildDemoModel, DEMO_MODEL_NAME } from '../../src/embed/demo-model.js';
import { startBullWorker } from '../../src/jobs/bullmq-worker.js';
import type { ResultDocument } from '../../src/jobs/result-document.js';
import { buildTar, png, type Rgb } from '../data/archive-fixtures.js';
import { deleteKeys, testLog, testRedisUrl, uniquePrefix } from '../helpers/queues.js';
import { clusterMatrix, npyOf } from '../jobs/task-fixtures.js';
import { settle, testServer, type TestServer } from './api-helpers.js';

/** A models folder with the project's demo model (built in code) and one broken description. */
function modelsDir(root: string): string {
  const dir = join(root, 'models');
  mkdirSync(dir, { recursive: true });
  const { onnx, description } = buildDemoModel();
  writeFileSync(join(dir, `${DEMO_MODEL_NAME}.onnx`), onnx);
  writeFileSync(join(dir, `${DEMO_MODEL_NAME}.json`), JSON.stringify(description));
  writeFileSync(join(dir, 'broken.json'), JSON.stringify({ ...description, name: 'broken', file: 'broken.onnx' }));
  return dir;
}

const modes = [
  { name: 'embedded queue', redis: false },
  { name: 'BullMQ flows with two workers', redis: true },
];

/**
 * Selections in an embedding space, in both queue modes: the job's embedding is split into shard
 * tasks that run before it (on any worker), cached, and reused by a later job; and the PCA space.
 */
describe.each(modes)('API: embedding and PCA spaces ($name)', (mode) => {
  let t: TestServer;
  let url: string;
  let stopWorkers: () => Promise<void> = async () => undefined;
  let images: string;
  const colours: Rgb[] = [
    [220, 40, 40],
    [40, 200, 60],
    [40, 60, 220],
  ];

  beforeAll(async () => {
    const root = (await import('node:fs')).mkdtempSync(join((await import('node:os')).tmpdir(), 'cairn-models-'));
    const env: Record<string, string> = { CAIRN_MODELS_DIR: modelsDir(root), CAIRN_EMBED_SHARD_ROWS: '20' };
    if (mode.redis) {
      const redisUrl = testRedisUrl();
      const prefix = uniquePrefix();
      t = await testServer({ ...env, REDIS_URL: redisUrl, CAIRN_QUEUE_PREFIX: prefix });
      const workers = await Promise.all(
        [0, 1].map(() => startBullWorker({ redisUrl, prefix, dataDir: t.dir, concurrency: 1, maxAttempts: 2, computeThreads: 1, checkpointEveryMs: 500, stalledMs: 5000, modelsDir: env.CAIRN_MODELS_DIR, log: testLog })),
      );
      stopWorkers = async () => {
        await Promise.all(workers.map((w) => w.close(0)));
        await deleteKeys(redisUrl, prefix);
      };
    } else {
      t = await testServer({ ...env, CAIRN_WORKER_CONCURRENCY: '2' });
    }
    url = t.server.url;
    const entries = [];
    for (let i = 0; i < 60; i++) entries.push({ name: `${['red', 'green', 'blue'][i % 3]}/img-${i}.png`, data: await png(40 + (i % 5) * 8, 40, colours[i % 3]) });
    const up = await request(url).post('/v1/datasets').attach('file', await buildTar(entries), 'swatches.tar');
    images = up.body.id;
    expect(await settle(url, `/v1/datasets/${images}`)).toMatchObject({ status: 'completed', rows: 60, hasImages: true });
  }, 120_000);
  afterAll(async () => {
    await stopWorkers();
    await t?.stop();
  });

  it('lists the ready demo model and the broken one with its error', async () => {
    const res = await request(url).get('/v1/models');
    expect(res.status).toBe(200);
    const byName = Object.fromEntries((res.body.models as Array<{ name: string; status: string; error: { code: string } | null }>).map((m) => [m.name, m]));
    expect(byName[DEMO_MODEL_NAME]).toMatchObject({ status: 'ready', error: null });
    expect(byName.broken).toMatchObject({ status: 'invalid', error: { code: 'MODEL_FILE_MISSING' } });
  });

  it('selects in the embedding space through shard tasks, then reuses the cached embedding', async () => {
    const first = await request(url).post('/v1/jobs').send({ datasetId: images, k: 3, maxIterations: 200, embedding: { model: DEMO_MODEL_NAME } });
    expect(first.status).toBe(202);
    expect(first.body.embedding.shards.map((s: { start: number; count: number }) => [s.start, s.count])).toEqual([
      [0, 20],
      [20, 20],
      [40, 20],
    ]);
    const done = await settle(url, `/v1/jobs/${first.body.id}`);
    expect(done.status).toBe('completed');
    expect((done.embedding as { shards: Array<{ status: string }> }).shards.every((s) => s.status === 'completed')).toBe(true);
    const result = (await request(url).get(`/v1/jobs/${first.body.id}/result`)).body as ResultDocument;
    expect(result.dims).toBe(64);
    expect(result.embedding).toMatchObject({ model: DEMO_MODEL_NAME, dims: 64, normalize: false });
    // The shard tasks ran before the job and embedded every row; the job itself embedded none.
    expect(result.embedding?.computedRowsInThisTask).toBe(0);
    // Three colours, three representatives: one of each (the labels are the folder names).
    expect(new Set(result.representatives.map((r) => r.label))).toEqual(new Set(['red', 'green', 'blue']));

    const second = await request(url).post('/v1/jobs').send({ datasetId: images, k: 2, maxIterations: 100, embedding: { model: DEMO_MODEL_NAME } });
    expect(second.body.embedding.shards).toEqual([]);
    expect((await settle(url, `/v1/jobs/${second.body.id}`)).status).toBe('completed');
    const again = (await request(url).get(`/v1/jobs/${second.body.id}/result`)).body as ResultDocument;
    expect(again.embedding?.computedRowsInThisTask).toBe(0);
  }, 120_000);

  it('selects in the PCA space of the images', async () => {
    const job = await request(url).post('/v1/jobs').send({ datasetId: images, k: 3, maxIterations: 200, space: 'pca:8' });
    expect((await settle(url, `/v1/jobs/${job.body.id}`)).status).toBe('completed');
    const result = (await request(url).get(`/v1/jobs/${job.body.id}/result`)).body as ResultDocument;
    expect(result.dims).toBe(8);
    expect(result.space).toBe('pca:8');
    expect(new Set(result.representatives.map((r) => r.label))).toEqual(new Set(['red', 'green', 'blue']));
  }, 60_000);

  it('cancelling a job stops its embedding shards: none is left queued or running, and the job never starts', async () => {
    // normalize: true is another cached embedding, so this job queues fresh shards.
    const job = await request(url).post('/v1/jobs').send({ datasetId: images, k: 3, embedding: { model: DEMO_MODEL_NAME, normalize: true } });
    expect(job.body.embedding.shards).toHaveLength(3);
    expect((await request(url).post(`/v1/jobs/${job.body.id}/cancel`)).status).toBe(202);
    const final = await settle(url, `/v1/jobs/${job.body.id}`);
    expect(final.status).toBe('cancelled');
    expect(final.startedAt).toBeNull();
    // A running shard stops at its next check (well under a second); none may go on queued or running.
    let shards: Array<{ status: string }> = [];
    for (let i = 0; i < 50; i++) {
      shards = (await request(url).get(`/v1/jobs/${job.body.id}`)).body.embedding.shards;
      if (shards.every((sh) => ['cancelled', 'completed', 'failed'].includes(sh.status))) break;
      await new Promise((r) => setTimeout(r, 100));
    }
    for (const sh of shards) expect(['cancelled', 'completed']).toContain(sh.status);
    expect(shards.some((sh) => sh.status === 'cancelled')).toBe(true);
    // A cancelled shard ends as part of the cancelled selection.
    const cancelled = shards.find((sh) => sh.status === 'cancelled') as unknown as { id: string };
    const state = JSON.parse(readFileSync(join(t.dir, 'tenants', 'local', 'embed', cancelled.id, 'state.json'), 'utf8')) as { error: { code: string } };
    expect(state.error.code).toBe('SELECTION_CANCELLED');
  }, 60_000);

  it('refuses unknown and invalid models, and embeddings of vector datasets', async () => {
    const unknown = await request(url).post('/v1/jobs').send({ datasetId: images, k: 2, embedding: { model: 'no-such-model' } });
    expect([unknown.status, unknown.body.error.code]).toEqual([404, 'MODEL_NOT_FOUND']);
    const invalid = await request(url).post('/v1/jobs').send({ datasetId: images, k: 2, embedding: { model: 'broken' } });
    expect([invalid.status, invalid.body.error.code]).toEqual([422, 'MODEL_INVALID']);
    const vectors = (await request(url).post('/v1/datasets').attach('file', npyOf(clusterMatrix(50, 1)), 'v.npy')).body.id;
    await settle(url, `/v1/datasets/${vectors}`);
    const notImages = await request(url).post('/v1/jobs').send({ datasetId: vectors, k: 2, embedding: { model: DEMO_MODEL_NAME } });
    expect([notImages.status, notImages.body.error.code]).toEqual([409, 'DATASET_NOT_IMAGES']);
    // A refused job leaves no shard tasks behind (they are written only after every check).
    const embedDir = join(t.dir, 'tenants', 'local', 'embed');
    const before = existsSync(embedDir) ? readdirSync(embedDir).length : 0;
    const tooWide = await request(url).post('/v1/jobs').send({ datasetId: images, k: 2, space: 'pca:100', embedding: { model: DEMO_MODEL_NAME, normalize: true } });
    expect([tooWide.status, tooWide.body.error.code]).toEqual([400, 'INVALID_ARGUMENT']);
    expect(existsSync(embedDir) ? readdirSync(embedDir).length : 0).toBe(before);
  });
});

/** The demo scenario's picture archive (scripts/demo-data.mjs), in the embedding space of the demo model and in a PCA space. */
describe('API: the demo image archive in embedding and PCA spaces', () => {
  let t: TestServer;
  let url: string;
  let datasetId: string;

  beforeAll(async () => {
    const { mkdtempSync } = await import('node:fs');
    const { tmpdir } = await import('node:os');
    const root = mkdtempSync(join(tmpdir(), 'cairn-demo-archive-'));
    t = await testServer({ CAIRN_MODELS_DIR: modelsDir(root), CAIRN_EMBED_SHARD_ROWS: '50' });
    url = t.server.url;
    // @ts-expect-error a plain .mjs script without type declarations
    const { writePartsArchive } = (await import('../../scripts/demo-data.mjs')) as { writePartsArchive: (path: string, count: number, seed: number) => Promise<Record<string, number>> };
    const archive = join(root, 'parts.tar.gz');
    await writePartsArchive(archive, 150, 7);
    datasetId = (await request(url).post('/v1/datasets').attach('file', archive, 'parts-images.tar.gz')).body.id;
    expect(await settle(url, `/v1/datasets/${datasetId}`)).toMatchObject({ status: 'completed', rows: 150, hasImages: true });
  }, 120_000);
  afterAll(async () => t?.stop());

  for (const [space, body, dims] of [
    ['the demo model’s embedding', { embedding: { model: DEMO_MODEL_NAME } }, 64],
    ['pca:16 of the pixels', { space: 'pca:16' }, 16],
  ] as const) {
    it(`selects 8 representatives in ${space}: better than random picks, several part kinds`, async () => {
      const job = await request(url).post('/v1/jobs').send({ datasetId, k: 8, seed: 1, ...body });
      expect(job.status).toBe(202);
      expect((await settle(url, `/v1/jobs/${job.body.id}`)).status).toBe('completed');
      const result = (await request(url).get(`/v1/jobs/${job.body.id}/result`)).body as ResultDocument;
      expect(result.dims).toBe(dims);
      expect(result.representatives).toHaveLength(8);
      expect(result.discrepancy.ratioToRandom!).toBeLessThan(1);
      // The labels are the part kinds (the archive's folders); 8 picks cover at least 3 of the 5 common ones.
      expect(new Set(result.representatives.map((r) => r.label)).size).toBeGreaterThanOrEqual(3);
    }, 60_000);
  }
});

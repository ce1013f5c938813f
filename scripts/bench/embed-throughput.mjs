#!/usr/bin/env node
// Embedding throughput through the service with BullMQ: 10,000 demo pictures (invented scenario,
// scripts/demo-data.mjs) embedded by the project's demo model (built in code, src/embed/demo-model.ts)
// as shard tasks of a selection job, with 1 and then 2 `cairn worker` processes (one compute thread
// each), then a second job on the same dataset and model, which must reuse the cached embedding.
// Prints images/s per run and the 2-worker / 1-worker ratio (the peer here is the 1-worker run).
// Needs `npm run build` and Redis (REDIS_URL, default redis://127.0.0.1:6379).
// Usage: node scripts/bench/embed-throughput.mjs [--images 10000] [--shard-rows 1000]
import { spawn } from 'node:child_process';
import { existsSync, mkdirSync, mkdtempSync, openAsBlob, rmSync, writeFileSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

const arg = (name, fallback) => {
  const i = process.argv.indexOf(`--${name}`);
  return i > 0 ? Number(process.argv[i + 1]) : fallback;
};
const IMAGES = arg('images', 10_000);
const SHARD_ROWS = arg('shard-rows', 1000);
const REDIS_URL = process.env.REDIS_URL ?? 'redis://127.0.0.1:6379';
if (!existsSync('dist/cli/main.js')) throw new Error('run `npm run build` first');

const { writePartsArchive } = await import('../demo-data.mjs');
const { buildDemoModel, DEMO_MODEL_NAME } = await import('../../dist/embed/demo-model.js');

const sleep = (ms) => new Promise((r) => setTimeout(r, ms));
const root = mkdtempSync(join(tmpdir(), 'cairn-bench-embed-'));
const dataDir = join(root, 'data');
const modelsDir = join(root, 'models');
mkdirSync(modelsDir);
const { onnx, description } = buildDemoModel();
writeFileSync(join(modelsDir, `${DEMO_MODEL_NAME}.onnx`), onnx);
writeFileSync(join(modelsDir, `${DEMO_MODEL_NAME}.json`), JSON.stringify(description));
const archive = join(root, 'parts.tar.gz');
process.stdout.write(`rendering ${IMAGES} demo pictures… `);
await writePartsArchive(archive, IMAGES, 11);
console.log('done');

const port = await new Promise((resolve) => {
  const s = createServer().listen(0, '127.0.0.1', () => {
    const p = s.address().port;
    s.close(() => resolve(p));
  });
});
const base = `http://127.0.0.1:${port}`;
const env = {
  ...process.env,
  REDIS_URL,
  CAIRN_QUEUE_PREFIX: `cairn-bench-${process.pid}`,
  CAIRN_DATA_DIR: dataDir,
  CAIRN_MODELS_DIR: modelsDir,
  CAIRN_PORT: String(port),
  CAIRN_EMBED_SHARD_ROWS: String(SHARD_ROWS),
  CAIRN_COMPUTE_THREADS: '1',
  CAIRN_RATE_LIMIT_PER_MINUTE: '0',
  LOG_LEVEL: 'warn',
};
const children = [];
const start = (cmd) => {
  const c = spawn(process.execPath, ['dist/cli/main.js', cmd], { env, stdio: ['ignore', 'inherit', 'inherit'] });
  children.push(c);
  return c;
};
const stop = async (c) => {
  if (c.exitCode !== null) return;
  const exited = new Promise((r) => c.once('exit', r));
  c.kill('SIGTERM');
  await exited;
};
async function json(res) {
  const body = await res.json();
  if (!res.ok) throw new Error(`${res.status} ${JSON.stringify(body)}`);
  return body;
}
const get = async (path) => json(await fetch(base + path));
const post = async (path, body) => json(await fetch(base + path, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) }));
async function until(path, done) {
  for (;;) {
    const b = await get(path);
    if (done(b)) return b;
    await sleep(200);
  }
}

/** One job on the dataset: seconds until every embedding shard finished, and until the job finished. */
async function run(datasetId) {
  const t0 = performance.now();
  const job = await post('/v1/jobs', { datasetId, k: 20, maxIterations: 150, embedding: { model: DEMO_MODEL_NAME } });
  let embedSeconds = null;
  const final = await until(`/v1/jobs/${job.id}`, (b) => {
    if (embedSeconds === null && b.embedding.shards.every((s) => s.status === 'completed')) embedSeconds = (performance.now() - t0) / 1000;
    return !['queued', 'running'].includes(b.status);
  });
  if (final.status !== 'completed') throw new Error(`job ${final.status}: ${JSON.stringify(final.error)}`);
  const result = await get(`/v1/jobs/${job.id}/result`);
  return { shards: job.embedding.shards.length, embedSeconds, jobSeconds: (performance.now() - t0) / 1000, computed: result.embedding.computedRowsInThisTask, embeddingSeconds: result.embedding.seconds };
}

try {
  const api = start('serve');
  for (let i = 0; ; i++) {
    try {
      if ((await fetch(`${base}/readyz`)).ok) break;
    } catch {
      // not listening yet
    }
    if (i > 150) throw new Error('the API did not start');
    await sleep(200);
  }
  const form = new FormData();
  form.set('file', await openAsBlob(archive), 'parts.tar.gz');
  const ds = await json(await fetch(`${base}/v1/datasets`, { method: 'POST', body: form }));
  let workers = [start('worker')];
  const ready = await until(`/v1/datasets/${ds.id}`, (b) => !['queued', 'running'].includes(b.status));
  if (ready.status !== 'completed') throw new Error(`ingestion ${ready.status}`);

  const one = await run(ds.id);
  // A fresh embedding for the 2-worker run: drop the cache the first run made.
  rmSync(join(dataDir, 'tenants', 'local', 'embeddings', ds.id), { recursive: true, force: true });
  workers.push(start('worker'));
  await sleep(1500);
  const two = await run(ds.id);
  const cached = await run(ds.id);

  const rate = (r) => (r.embedSeconds ? IMAGES / r.embedSeconds : NaN);
  console.log(`\nembedding ${IMAGES} pictures (128 px thumbnails → 64×64 input, demo model ${DEMO_MODEL_NAME}), shards of ${SHARD_ROWS}`);
  console.log('run                 shards  embed s   images/s  job s   rows embedded by the job itself');
  console.log(`1 worker            ${String(one.shards).padStart(6)}  ${one.embedSeconds.toFixed(2).padStart(7)}  ${rate(one).toFixed(0).padStart(8)}  ${one.jobSeconds.toFixed(2).padStart(6)}  ${one.computed}`);
  console.log(`2 workers           ${String(two.shards).padStart(6)}  ${two.embedSeconds.toFixed(2).padStart(7)}  ${rate(two).toFixed(0).padStart(8)}  ${two.jobSeconds.toFixed(2).padStart(6)}  ${two.computed}`);
  console.log(`2nd job (cache)     ${String(cached.shards).padStart(6)}  ${'-'.padStart(7)}  ${'-'.padStart(8)}  ${cached.jobSeconds.toFixed(2).padStart(6)}  ${cached.computed}`);
  console.log(`ratio 2 workers / 1 worker (images/s): ${(rate(two) / rate(one)).toFixed(2)}`);
  console.log(`cache hit: ${cached.shards === 0 && cached.computed === 0 ? 'yes (no shards queued, nothing recomputed)' : 'NO'}`);
  for (const w of workers) await stop(w);
  workers = [];
  await stop(api);
} finally {
  for (const c of children) if (c.exitCode === null) c.kill('SIGKILL');
  rmSync(root, { recursive: true, force: true });
  // The queue keys of this run.
  const { Redis } = await import('ioredis');
  const r = new Redis(REDIS_URL);
  let cursor = '0';
  do {
    const [next, keys] = await r.scan(cursor, 'MATCH', `${env.CAIRN_QUEUE_PREFIX}:*`, 'COUNT', 500);
    if (keys.length) await r.del(...keys);
    cursor = next;
  } while (cursor !== '0');
  r.disconnect();
}

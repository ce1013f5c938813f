#!/usr/bin/env node
// The demo of the service, end to end on the embedded default (no Redis): starts `cairn serve` on a
// free local port with a throw-away data folder, uploads demo/parts-images.tar.gz, waits for its
// ingestion, asks for 12 representatives, follows the job's progress, then saves
//   demo/parts-result.json          the result (representatives, weights, coverage, D²)
//   demo/parts-contact-sheet.png    the representatives' pictures with rank and weight
//   demo/parts-embedding-result.json the same selection in the embedding space of the project's demo
//                                    model (built in code into demo/models/, src/embed/demo-model.ts)
// and stops the server, deleting its data folder. Run `node scripts/demo-data.mjs` first.
import { spawn } from 'node:child_process';
import { mkdirSync, mkdtempSync, openAsBlob, rmSync, writeFileSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

const K = 12;
const archive = 'demo/parts-images.tar.gz';

function freePort() {
  return new Promise((resolve, reject) => {
    const s = createServer();
    s.once('error', reject);
    s.listen(0, '127.0.0.1', () => {
      const { port } = s.address();
      s.close(() => resolve(port));
    });
  });
}

const sleep = (ms) => new Promise((r) => setTimeout(r, ms));

async function json(res) {
  const body = await res.json();
  if (!res.ok) throw new Error(`${res.status} ${JSON.stringify(body)}`);
  return body;
}

async function until(url, done) {
  for (;;) {
    const body = await json(await fetch(url));
    if (done(body)) return body;
    await sleep(250);
  }
}

/** Polls the readiness probe until it answers 200, for up to 30 s (the server takes a moment to listen). */
async function waitReady(url) {
  const deadline = Date.now() + 30_000;
  for (;;) {
    try {
      if ((await fetch(url)).ok) return;
    } catch {
      // not listening yet
    }
    if (Date.now() > deadline) throw new Error(`the server did not become ready at ${url}`);
    await sleep(200);
  }
}

const { buildDemoModel, DEMO_MODEL_NAME } = await import('../dist/embed/demo-model.js');
const modelsDir = 'demo/models';
mkdirSync(modelsDir, { recursive: true });
const model = buildDemoModel();
writeFileSync(join(modelsDir, `${DEMO_MODEL_NAME}.onnx`), model.onnx);
writeFileSync(join(modelsDir, `${DEMO_MODEL_NAME}.json`), JSON.stringify(model.description, null, 2) + '\n');

const dataDir = mkdtempSync(join(tmpdir(), 'cairn-demo-'));
const port = await freePort();
const base = `http://127.0.0.1:${port}`;
const server = spawn(process.execPath, ['dist/cli/main.js', 'serve'], {
  env: { ...process.env, CAIRN_DATA_DIR: dataDir, CAIRN_PORT: String(port), CAIRN_MODELS_DIR: modelsDir, LOG_LEVEL: 'warn' },
  stdio: ['ignore', 'inherit', 'inherit'],
});
const exited = new Promise((r) => server.once('exit', r));

try {
  await waitReady(`${base}/readyz`);
  console.log(`cairn API at ${base} (embedded queue, data in ${dataDir})`);

  const form = new FormData();
  form.set('file', await openAsBlob(archive), 'parts-images.tar.gz');
  form.set('name', 'sorting line, week 48');
  const uploaded = await json(await fetch(`${base}/v1/datasets`, { method: 'POST', body: form }));
  console.log(`uploaded ${archive} as dataset ${uploaded.id}; ingesting…`);
  const ds = await until(`${base}/v1/datasets/${uploaded.id}`, (b) => !['queued', 'running'].includes(b.status));
  if (ds.status !== 'completed') throw new Error(`ingestion ${ds.status}: ${JSON.stringify(ds.error)}`);
  console.log(`dataset ready: ${ds.rows} pictures, ${ds.cols} features each`);

  /** Creates a job, follows it to the end, and returns its result. */
  async function runJob(body, title) {
    const job = await json(await fetch(`${base}/v1/jobs`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) }));
    console.log(`\n${title}: job ${job.id}`);
    let lastPhase = '';
    const done = await until(`${base}/v1/jobs/${job.id}`, (b) => {
      const p = b.progress;
      if (p.phase !== lastPhase) {
        lastPhase = p.phase;
        process.stdout.write(`  ${b.status}, ${p.phase} (${Math.round(p.fraction * 100)}%)\n`);
      }
      return !['queued', 'running'].includes(b.status);
    });
    if (done.status !== 'completed') throw new Error(`job ${done.status}: ${JSON.stringify(done.error)}`);
    const result = await json(await fetch(`${base}/v1/jobs/${job.id}/result`));
    console.log(`${K} representatives of ${result.rows} pictures (${result.dims}-d ${result.embedding ? `embedding of ${result.embedding.model}` : result.space} space):`);
    console.log('rank  weight  share   label');
    for (const r of result.representatives) console.log(`${String(r.rank).padStart(4)}  ${r.weight.toFixed(3)}   ${r.share.toFixed(3)}   ${r.label ?? '-'}`);
    const d = result.discrepancy;
    console.log(`D² = ${d.value.toPrecision(4)}; random ${K}-subsets: ${d.random.median.toPrecision(4)} (ratio ${d.ratioToRandom?.toFixed(3) ?? 'n/a'})`);
    return { job, result };
  }

  const pixels = await runJob({ datasetId: ds.id, k: K, name: 'demo' }, 'pixels (32×32 rgb)');
  writeFileSync('demo/parts-result.json', JSON.stringify(pixels.result, null, 2) + '\n');
  const sheet = await fetch(`${base}/v1/jobs/${pixels.job.id}/contact-sheet.png`);
  writeFileSync('demo/parts-contact-sheet.png', Buffer.from(await sheet.arrayBuffer()));
  const embedded = await runJob({ datasetId: ds.id, k: K, name: 'demo, embedding', embedding: { model: DEMO_MODEL_NAME } }, `embedding space of ${DEMO_MODEL_NAME}`);
  writeFileSync('demo/parts-embedding-result.json', JSON.stringify(embedded.result, null, 2) + '\n');
  console.log('\nwrote demo/parts-result.json, demo/parts-contact-sheet.png and demo/parts-embedding-result.json');
} finally {
  server.kill('SIGTERM');
  await exited;
  rmSync(dataDir, { recursive: true, force: true });
}

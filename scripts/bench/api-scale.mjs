#!/usr/bin/env node
// Upload to result through the HTTP API at scale: the 1,000,000 × 128 float32 mixture of
// `bench:scale` (lib/mixture.mjs, same seed, same rows) uploaded to `cairn serve` on the embedded
// queue, ingested, selected with k = 256 and the result fetched.
//
//   npm run build && node scripts/bench/api-scale.mjs --no-build [--rows 1000000] [--k 256] [--seed 0] [--poll-ms 100]
//
// What it does:
//   1. Builds dist/ (unless --no-build) and runs a private snapshot of it (lib/machine.mjs), so a
//      concurrent rebuild cannot change the server mid-run. Generates the .npy into a temp folder,
//      streamed to disk in chunks (outside the timed phases).
//   2. Starts `node dist/cli/main.js serve` as a child process: embedded queue (REDIS_URL and
//      CAIRN_API_KEYS removed from its environment), a free port, CAIRN_DATA_DIR in the temp folder,
//      CAIRN_MAX_UPLOAD_BYTES at least twice the file, the rate limiter off (the polls would count),
//      LOG_LEVEL=warn; the rest of the environment passes through (e.g. CAIRN_COMPUTE_THREADS).
//   3. Timed, each phase starting the moment the previous one ended:
//        upload  POST /v1/datasets, the file streamed from disk as multipart (Content-Length known),
//                until the 202 answer (the server has written and hashed it and queued the ingestion);
//        ingest  polls GET /v1/datasets/<id> every --poll-ms until `completed`;
//        select  POST /v1/jobs {datasetId, k, seed} (every other option at its default, as
//                `cairn select --k 256` in bench:scale), polls GET /v1/jobs/<id> until `completed`;
//        result  GET /v1/jobs/<id>/result, read whole and parsed.
//      The total is upload start → result parsed. Then, not in the total, the assignments export
//      (GET /v1/jobs/<id>/assignments, ndjson, streamed and counted).
//   4. Stops the server (SIGTERM) and removes the temp folder; on an error or Ctrl-C the server is
//      killed and the folder removed as well.
//
// How to read it:
//   * Target: upload → result ≤ 60 s.
//   * Each phase's wall time is what a client sees (polling adds up to --poll-ms per wait). The
//     split inside a phase comes from the API's own fields: createdAt / startedAt / finishedAt of the
//     dataset and of the job (queue wait = startedAt − createdAt, run = finishedAt − startedAt), the
//     job's `progress.phase` as first seen by the polls, `summary.seconds` and the result's
//     `trace.seconds` (the time inside select(); the rest of the run is loading the stored dataset
//     and writing result, assignments and projection).
//   * Peak RSS is the server process's VmHWM (/proc/<pid>/status): the API and the embedded queue's
//     worker threads are one process. It is read after each phase (VmHWM only grows).
//   * On the embedded queue a selection computes on cores − 1 threads (one core stays with the API),
//     where `cairn select` uses every core: compare the select phase with bench:scale with that in mind.
import { performance } from 'node:perf_hooks';
import os from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { buildDist, firstTouchMibPerSecond, loadavg, machineLine, snapshotDist, uptime } from './lib/machine.mjs';
import { describeMixture, writeMixtureNpy } from './lib/mixture.mjs';
import { api, freePort, hostBusySeconds, processCpu, procStatusKb, startServe, stopServe, uploadMultipart, waitReady, waitUntil } from './lib/service.mjs';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..');
const TARGET_SECONDS = 60;

const argv = process.argv.slice(2);
const option = (name, fallback) => {
  const i = argv.indexOf(name);
  return i >= 0 ? Number(argv[i + 1]) : fallback;
};
const N = option('--rows', 1_000_000);
const D = 128;
const K = option('--k', 256);
const SEED = option('--seed', 0);
const POLL_MS = option('--poll-ms', 100);

// Registered before snapshotDist's own exit handler (which removes the temp folder), so the server
// is gone before its data folder is deleted, whatever ends this process.
let server = null;
process.on('exit', () => {
  if (server?.alive()) server.child.kill('SIGKILL');
});
process.on('SIGINT', () => process.exit(130));
process.on('SIGTERM', () => process.exit(143));

if (!argv.includes('--no-build')) buildDist(ROOT);
const { work, cli: CLI, dist } = await snapshotDist(ROOT, 'api-scale');
const { Rng } = await dist('core/random.js');
const { loadConfig } = await dist('config.js');

const seconds = (ms) => (ms / 1000).toFixed(2);
const mib = (bytes) => (bytes / 2 ** 20).toFixed(1);
const isoMs = (iso) => (iso ? Date.parse(iso) : NaN);
const hwmMib = () => (procStatusKb(server.child.pid, 'VmHWM') ?? NaN) / 1024;
/** The server's peak RSS and CPU seconds so far, read at the end of each phase. */
const marks = {};
const mark = (phase) => {
  const own = process.cpuUsage();
  marks[phase] = { hwm: hwmMib(), cpu: processCpu(server.child.pid), host: hostBusySeconds(), bench: (own.user + own.system) / 1e6, at: performance.now() };
};

/** Polls a task resource until it is completed; records when each status/phase was first seen. */
async function follow(what, path, timeoutMs, since) {
  const seen = [];
  const body = await waitUntil(what, timeoutMs, async () => {
    const r = await api(base, 'GET', path);
    if (r.status !== 200) throw new Error(`GET ${path} answered ${r.status}: ${r.text.slice(0, 300)}`);
    const s = r.body;
    const label = s.status === 'running' ? s.progress.phase : s.status;
    if (seen.at(-1)?.label !== label) seen.push({ label, at: performance.now() - since });
    if (s.status === 'completed') return s;
    if (!['queued', 'running'].includes(s.status)) throw new Error(`${what}: ${s.status}: ${JSON.stringify(s.error)}`);
    return null;
  }, server, POLL_MS);
  return { body, seen };
}

/** queue wait and run from the resource's own timestamps. */
const split = (s) => ({ wait: isoMs(s.startedAt) - isoMs(s.createdAt), run: isoMs(s.finishedAt) - isoMs(s.startedAt) });

// --- data (not timed) ----------------------------------------------------------------------------
const tGen = performance.now();
const npyPath = join(work, 'api-scale.npy');
const npyBytes = await writeMixtureNpy(Rng, npyPath, { rows: N, cols: D, seed: SEED });
const genMs = performance.now() - tGen;

// --- server --------------------------------------------------------------------------------------
const port = await freePort();
const env = { ...process.env };
for (const name of ['REDIS_URL', 'CAIRN_API_KEYS', 'CAIRN_HOST']) delete env[name];
Object.assign(env, {
  CAIRN_DATA_DIR: join(work, 'data'),
  CAIRN_PORT: String(port),
  CAIRN_MAX_UPLOAD_BYTES: String(Math.max(2 * npyBytes, 2 ** 30)),
  CAIRN_RATE_LIMIT_PER_MINUTE: '0',
  CAIRN_SHUTDOWN_GRACE_SECONDS: env.CAIRN_SHUTDOWN_GRACE_SECONDS ?? '5',
  LOG_LEVEL: 'warn',
});
const config = loadConfig(env); // a bad pass-through setting fails here, with its name
const threads = config.CAIRN_COMPUTE_THREADS || Math.max(1, os.availableParallelism() - 1);
const base = `http://127.0.0.1:${port}`;

console.log(`api-scale bench: ${N} × ${D} float32, ${describeMixture()} → ${mib(npyBytes)} MiB .npy (generated in ${seconds(genMs)} s); k ${K}, seed ${SEED}; target upload → result ≤ ${TARGET_SECONDS} s`);
console.log(`${machineLine()}; fresh memory first touch ${firstTouchMibPerSecond().toFixed(0)} MiB/s`);
console.log(`server: node dist/cli/main.js serve (embedded queue, snapshot of dist/), compute threads ${threads}${config.CAIRN_COMPUTE_THREADS ? ' (CAIRN_COMPUTE_THREADS)' : ' (default: cores − 1)'}, upload limit ${mib(config.CAIRN_MAX_UPLOAD_BYTES)} MiB; polls every ${POLL_MS} ms`);

try {
  server = startServe(CLI, ROOT, env);
  await waitReady(base, server);
  const startRssMib = (procStatusKb(server.child.pid, 'VmRSS') ?? NaN) / 1024;
  console.log(`before: ${uptime()}`);
  console.log('');

  // upload
  mark('start');
  const t0 = marks.start.at;
  const up = await uploadMultipart(base, '/v1/datasets', npyPath, { name: 'api-scale bench' });
  if (up.status !== 202) throw new Error(`upload answered ${up.status}: ${up.text.slice(0, 300)}`);
  const tUp = performance.now();
  mark('upload');

  // ingest
  const ingest = await follow('ingestion', `/v1/datasets/${up.body.id}`, 600_000, tUp);
  const ds = ingest.body;
  const tIngest = performance.now();
  mark('ingest');

  // select
  const created = await api(base, 'POST', '/v1/jobs', { datasetId: ds.id, k: K, seed: SEED, name: 'api-scale bench' });
  if (created.status !== 202) throw new Error(`POST /v1/jobs answered ${created.status}: ${created.text.slice(0, 300)}`);
  const jobId = created.body.id;
  const select = await follow('the selection', `/v1/jobs/${jobId}`, 1_800_000, tIngest);
  const job = select.body;
  const tSelect = performance.now();
  mark('select');

  // result
  const res = await fetch(`${base}/v1/jobs/${jobId}/result`);
  const resultText = await res.text();
  if (res.status !== 200) throw new Error(`GET result answered ${res.status}: ${resultText.slice(0, 300)}`);
  const result = JSON.parse(resultText);
  const tResult = performance.now();
  mark('result');

  // assignments (not in the total)
  const tA0 = performance.now();
  const ares = await fetch(`${base}/v1/jobs/${jobId}/assignments?format=ndjson`);
  if (ares.status !== 200) throw new Error(`GET assignments answered ${ares.status}: ${(await ares.text()).slice(0, 300)}`);
  let aBytes = 0;
  let aLines = 0;
  for await (const chunk of ares.body) {
    aBytes += chunk.length;
    for (let i = chunk.indexOf(10); i >= 0; i = chunk.indexOf(10, i + 1)) aLines++;
  }
  const tA1 = performance.now();
  mark('assignments');

  // --- report ------------------------------------------------------------------------------------
  if (ds.rows !== N || ds.cols !== D) throw new Error(`dataset stored as ${ds.rows} × ${ds.cols}, expected ${N} × ${D}`);
  if (result.representatives?.length !== K) throw new Error(`result has ${result.representatives?.length} representatives, expected ${K}`);
  if (aLines !== N) throw new Error(`assignments have ${aLines} lines, expected ${N}`);
  const ing = split(ds);
  const sel = split(job);
  const trace = result.trace?.seconds ?? {};
  const inSelect = Object.values(trace).reduce((s, v) => s + v, 0);
  const phases = (seen) => seen.map((p) => `${p.label} ${seconds(p.at)}`).join(', ');
  const total = tResult - t0;
  const line = (name, ms, note) => console.log(`${name.padEnd(12)} ${seconds(ms).padStart(7)} s  ${note}`);
  line('upload', tUp - t0, `POST /v1/datasets → 202: ${mib(npyBytes)} MiB streamed, ${(npyBytes / 2 ** 20 / ((tUp - t0) / 1000)).toFixed(0)} MiB/s`);
  line('ingest', tIngest - tUp, `→ completed: queue wait ${seconds(ing.wait)} s + run ${seconds(ing.run)} s (startedAt/finishedAt); seen: ${phases(ingest.seen)}`);
  line('select', tSelect - tIngest, `POST /v1/jobs → completed: queue wait ${seconds(sel.wait)} s + run ${seconds(sel.run)} s (startedAt/finishedAt); summary.seconds ${job.summary?.seconds?.toFixed(2)}`);
  console.log(`${''.padEnd(22)}phases first seen (s after ingest end): ${phases(select.seen)}`);
  console.log(`${''.padEnd(22)}trace.seconds: ${Object.entries(trace).map(([p, v]) => `${p} ${v.toFixed(2)}`).join(', ')}; in select() ${inSelect.toFixed(2)} s, rest of the run ${(sel.run / 1000 - inSelect).toFixed(2)} s (dataset load, result, assignments, projection)`);
  line('result', tResult - tSelect, `GET /v1/jobs/<id>/result: ${(resultText.length / 1024).toFixed(0)} KiB JSON, parsed; D² ${result.discrepancy?.value?.toPrecision(6)}, ratioToRandom ${result.discrepancy?.ratioToRandom?.toFixed(3)}`);
  line('total', total, `upload → result (target ≤ ${TARGET_SECONDS} s): ${total / 1000 <= TARGET_SECONDS ? 'met' : 'MISSED'}`);
  line('assignments', tA1 - tA0, `GET /v1/jobs/<id>/assignments?format=ndjson (not in the total): ${aLines} lines, ${mib(aBytes)} MiB, streamed`);
  console.log('');
  const h = (v) => v.toFixed(0);
  const phaseNames = ['upload', 'ingest', 'select', 'result', 'assignments'];
  console.log(`server peak RSS (VmHWM): ${h(marks.assignments.hwm)} MiB; after ${phaseNames.map((p) => `${p} ${h(marks[p].hwm)}`).join(', ')}; VmRSS when ready ${h(startRssMib)} MiB`);
  const cpu = (p, i) => {
    const a = marks[i === 0 ? 'start' : phaseNames[i - 1]].cpu;
    const b = marks[p].cpu;
    return a && b ? `${p} ${(b.user - a.user).toFixed(1)}/${(b.system - a.system).toFixed(1)}` : `${p} ?`;
  };
  // Everything else on the machine (other processes, the kernel's own threads) during the timed
  // phases, in % of one core: the other engineers' builds and tests share these cores.
  const [a, b] = [marks.start, marks.result];
  const others = a.host !== null && b.host !== null && a.cpu && b.cpu ? ((b.host - a.host - (b.cpu.user + b.cpu.system - a.cpu.user - a.cpu.system) - (b.bench - a.bench)) / ((b.at - a.at) / 1000)) * 100 : null;
  const othersNote = others === null ? 'others CPU ?' : `others CPU ${Math.max(0, others).toFixed(0)}% of one core during upload → result`;
  console.log(others !== null && others > 15 ? `WARNING: ${othersNote}: other work took the cores, these figures are not representative; run again on a quiet machine` : othersNote);
  console.log(`server CPU s per phase, user/system (all threads; /proc/<pid>/stat): ${phaseNames.map(cpu).join(', ')}`);
  const how = await stopServe(server, 30_000);
  console.log(`server stopped (${how.signal ? `signal ${how.signal}` : `exit code ${how.code}`}); load average now: ${loadavg()}`);
} catch (err) {
  process.exitCode = 1;
  console.error(`api-scale failed: ${err instanceof Error ? err.message : String(err)}`);
  if (server?.tail.length) console.error(`last server output:\n${server.tail.join('\n')}`);
}
process.exit();

#!/usr/bin/env node
// Status-poll latency while a selection runs: how fast GET /v1/jobs/<id> (what the dashboard polls)
// answers under load while the same process is running a selection, measured against GET /healthz
// under the same load in the same run.
//
//   npm run build && node scripts/bench/status-poll.mjs [--connections 100] [--seconds 15]
//       [--warmup 2] [--rows 200000] [--cols 64] [--k 64] [--idle] [--pin]
//
// What it does:
//   1. Starts `node dist/cli/main.js serve` (from a private copy of dist/, see lib/machine.mjs) in
//      a child process (embedded queue: REDIS_URL is removed from its environment) on a free port,
//      over a fresh temp data folder, configured as a deployed server polls: one API key generated
//      for the run (every /v1 request authenticates), the rate limiter on with a limit the load
//      cannot reach (CAIRN_RATE_LIMIT_PER_MINUTE=10000000, so its bookkeeping is measured but no
//      429 answers), LOG_LEVEL at its default (info). A separate process, so the load generator
//      (autocannon, in this process) does not share the API's event loop. The rest of the
//      environment is passed through, e.g. `CAIRN_COMPUTE_THREADS=1 node scripts/bench/status-poll.mjs`,
//      `LOG_LEVEL=debug …` (one line per request) or `CAIRN_RATE_LIMIT_PER_MINUTE=0 …` (limiter off).
//   2. Uploads a generated rows × cols float32 .npy (16 Gaussian clusters, seeded PRNG), waits for
//      its ingestion, creates a selection that cannot finish during the measurement
//      (maxIterations 1,000,000, plateauTolerance 0) and waits until it is running in its descent.
//   3. With `--connections` keep-alive connections (closed loop: each sends its next request when
//      the previous answer arrives), runs `--warmup` s unrecorded and then `--seconds` s recorded,
//      first against GET /v1/jobs/<id>, then against GET /healthz. Prints requests/s and latency
//      p50 / p90 / p99 / max per target, the non-200 answers and socket errors, the job's descent
//      iteration before and after each run, and checks that the job was still running at the end.
//   4. Cancels the job, stops the server (SIGTERM, waits for its exit) and removes the temp folder,
//      also on failure (the child is killed on any error).
//   --pin runs the server on core 0 and this process (the load generator) on core 1 (taskset), so
//   the two do not preempt each other; the selection's thread then shares core 0 with the event
//   loop at its lower priority (and runs slower: see its iterations per second). Not the default:
//   the default rows are the unpinned machine.
//   --idle also measures both targets before the job is created (no selection running), which
//   separates what the running selection costs from what the route costs: the status row then
//   reads a job that was cancelled at once (the same two files; a completed job would read a third).
//
// How to read it:
//   * Target: p99 of GET /v1/jobs/<id> ≤ 20 ms with 100 connections while the selection runs.
//   * /healthz is the peer: same server, same load, same running selection, no disk reads and a
//     tiny body. p99(status) / p99(healthz) is what the status read itself costs (two small JSON
//     files read per request, plus a stat, plus serializing a larger body); the healthz row alone
//     shows what the machine (load generator + API + selection on the same cores) allows at all.
//   * Closed loop: with C connections, mean latency ≈ C / (requests per second) (Little's law), so
//     with 100 connections a p99 ≤ 20 ms needs well over 5,000 req/s. Latency here measures the
//     server's throughput under saturation as much as the time of a single request. (autocannon's
//     overallRate option is no fix for that: each connection sends its whole per-second quota
//     back to back at the start of every second, so it measures bursts, not paced polling.)
//   * autocannon records latencies in whole milliseconds (an HDR histogram with 1 ms resolution),
//     and only of 2xx answers; hence the separate non-200 count, which must be 0.
//   * "loop µs/req" is the API's main thread CPU time (user + system) per answer: the cost of one
//     request to the event loop, including the kernel's work for its socket reads and writes.
//     It is the steadiest figure on a shared machine, so compare changes of the route with it.
//   * "server CPU" is the API process (event loop + libuv pool + the selection's thread), "loadgen
//     CPU" this process (autocannon), "others CPU" the rest of the machine (other processes, the
//     kernel), all in % of one core over the recorded run (Linux /proc; 2 cores = 200% in all).
//     Others above 15% (the script prints a warning) means other work took the cores and those
//     rows are not representative: run again on a quiet machine.
//   * The descent iteration counts show that the selection really ran during the load, and how
//     much the load slowed it (iterations per second per row).
import { spawnSync } from 'node:child_process';
import { existsSync, openAsBlob, readFileSync } from 'node:fs';
import { mkdtemp, rm } from 'node:fs/promises';
import os from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { snapshotDist } from './lib/machine.mjs';
import { writeNpyFloat32 } from './lib/npy.mjs';
import { api as apiCall, freePort, hostBusySeconds, startServe, stopServe, waitUntil } from './lib/service.mjs';
import { prng } from '../demo-data.mjs'; // mulberry32

const root = fileURLToPath(new URL('../../', import.meta.url));
if (!existsSync(join(root, 'dist', 'cli', 'main.js')) || !existsSync(join(root, 'dist', 'config.js'))) {
  console.error('status-poll: dist/ not found: run `npm run build` first.');
  process.exit(1);
}
const { cli, dist } = await snapshotDist(root, 'poll');
const { loadConfig } = await dist('config.js');
const { hashApiKey, newApiKey } = await dist('api/auth.js');
const { default: autocannon } = await import('autocannon');

const flag = (name, fallback) => {
  const i = process.argv.indexOf(name);
  return i > 0 ? Number(process.argv[i + 1]) : fallback;
};
const CONNECTIONS = flag('--connections', 100);
const SECONDS = flag('--seconds', 15);
const WARMUP = flag('--warmup', 2);
const ROWS = flag('--rows', 200_000);
const COLS = flag('--cols', 64);
const K = flag('--k', 64);
/** Requests per second per connection (a dashboard polling on a timer); unset: closed loop, as fast as answers come. */
const RATE = flag('--rate', 0);
const IDLE = process.argv.includes('--idle');
const PIN = process.argv.includes('--pin');
/** The run's API key: every /v1 request carries it, as a deployed server requires. */
const API_KEY = newApiKey();
const AUTH = { authorization: `Bearer ${API_KEY}` };
const TARGET_P99_MS = 20;

// ---------------------------------------------------------------------------------------------
// Data: 16 Gaussian clusters (mulberry32 + Box–Muller), so the descent does real work.


function clusteredMatrix(rows, cols, seed) {
  const rnd = prng(seed);
  const normal = () => Math.sqrt(-2 * Math.log(1 - rnd())) * Math.cos(2 * Math.PI * rnd());
  const centres = Array.from({ length: 16 }, () => Float32Array.from({ length: cols }, () => normal() * 4));
  const m = new Float32Array(rows * cols);
  for (let i = 0; i < rows; i++) {
    const c = centres[Math.floor(rnd() * centres.length)];
    for (let j = 0; j < cols; j++) m[i * cols + j] = c[j] + normal();
  }
  return m;
}

// ---------------------------------------------------------------------------------------------
// The server child process.

// ---------------------------------------------------------------------------------------------
// HTTP helpers.

/** The run's /v1 calls, with its API key. */
const api = (base, method, path, body) => apiCall(base, method, path, body, AUTH);

async function jobState(base, jobId) {
  const r = await api(base, 'GET', `/v1/jobs/${jobId}`);
  if (r.status !== 200) throw new Error(`GET /v1/jobs/${jobId} answered ${r.status}: ${r.text.slice(0, 300)}`);
  return r.body;
}

// ---------------------------------------------------------------------------------------------
// Load.

function cannon(url, seconds) {
  // With a rate, autocannon corrects for coordinated omission (a late answer delays the next send;
  // latencies are counted from when the request was due), so paced figures are not flattered.
  return autocannon({ url, connections: CONNECTIONS, duration: seconds, pipelining: 1, timeout: 10, headers: AUTH, ...(RATE > 0 ? { connectionRate: RATE } : {}) });
}

/** CPU seconds (user + system) of a process (or, with `tid`, one of its threads) so far, from /proc; null where there is none. */
function processCpuSeconds(pid, tid) {
  try {
    const stat = readFileSync(tid ? `/proc/${pid}/task/${tid}/stat` : `/proc/${pid}/stat`, 'utf8');
    const fields = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    return (Number(fields[11]) + Number(fields[12])) / CLOCK_TICKS;
  } catch {
    return null;
  }
}
const CLOCK_TICKS = 100; // USER_HZ: 100 on every Linux architecture Node supports

let serverPid = 0;

/** Warm-up (unrecorded), then the recorded run; with a job, its state before and after. */
async function measure(label, base, path, jobId) {
  if (WARMUP > 0) await cannon(base + path, WARMUP);
  const before = jobId ? await jobState(base, jobId) : null;
  const s0 = processCpuSeconds(serverPid);
  const m0 = processCpuSeconds(serverPid, serverPid);
  const h0 = hostBusySeconds();
  const g0 = process.cpuUsage();
  const w0 = Date.now();
  const r = await cannon(base + path, SECONDS);
  const wall = (Date.now() - w0) / 1000;
  const s1 = processCpuSeconds(serverPid);
  const m1 = processCpuSeconds(serverPid, serverPid);
  const h1 = hostBusySeconds();
  const g = process.cpuUsage(g0);
  const after = jobId ? await jobState(base, jobId) : null;
  const codes = Object.entries(r.statusCodeStats ?? {});
  const ok = codes.filter(([code]) => code === '200').reduce((s, [, v]) => s + v.count, 0);
  const non200 = codes.filter(([code]) => code !== '200').reduce((s, [, v]) => s + v.count, 0);
  return {
    label,
    rps: ok / r.duration,
    p50: r.latency.p50,
    p90: r.latency.p90,
    p99: r.latency.p99,
    max: r.latency.max,
    ok,
    non200,
    non2xx: r.non2xx,
    codes: Object.fromEntries(codes.map(([c, v]) => [c, v.count])),
    errors: r.errors,
    timeouts: r.timeouts,
    duration: r.duration,
    serverCpu: s0 !== null && s1 !== null ? ((s1 - s0) / wall) * 100 : null,
    // The main thread's CPU per answer: what one request costs the event loop, kernel time of its
    // socket calls included. Unlike latency, it hardly depends on what else runs on the machine.
    loopUsPerRequest: m0 !== null && m1 !== null && ok + non200 > 0 ? ((m1 - m0) / (ok + non200)) * 1e6 : null,
    loadgenCpu: ((g.user + g.system) / 1e6 / wall) * 100,
    // Everything else on the machine: other processes, the kernel's own work.
    othersCpu: s0 !== null && s1 !== null && h0 !== null && h1 !== null ? Math.max(0, ((h1 - h0 - (s1 - s0)) / wall) * 100 - ((g.user + g.system) / 1e6 / wall) * 100) : null,
    before,
    after,
  };
}

const iterOf = (s) => s?.progress?.iteration ?? null;
const pad = (v, n) => String(v).padStart(n);

function printTable(rows) {
  const head = `${'target'.padEnd(32)} ${pad('req/s', 8)} ${pad('p50', 5)} ${pad('p90', 5)} ${pad('p99', 5)} ${pad('max', 6)} ${pad('non-200', 8)} ${pad('errors', 7)} ${pad('server CPU', 10)} ${pad('loop µs/req', 11)} ${pad('loadgen CPU', 11)} ${pad('others CPU', 10)}  descent iterations (start → end, it/s)`;
  console.log(head);
  for (const r of rows) {
    const it0 = iterOf(r.before);
    const it1 = iterOf(r.after);
    const its = it0 !== null && it1 !== null ? `${it0} → ${it1} (${((it1 - it0) / r.duration).toFixed(1)} it/s)` : r.before ? '?' : '-';
    console.log(
      `${r.label.padEnd(32)} ${pad(r.rps.toFixed(0), 8)} ${pad(r.p50, 5)} ${pad(r.p90, 5)} ${pad(r.p99, 5)} ${pad(r.max, 6)} ${pad(r.non200, 8)} ${pad(r.errors + r.timeouts, 7)} ${pad(r.serverCpu === null ? '?' : `${r.serverCpu.toFixed(0)}%`, 10)} ${pad(r.loopUsPerRequest === null ? '?' : r.loopUsPerRequest.toFixed(0), 11)} ${pad(`${r.loadgenCpu.toFixed(0)}%`, 11)} ${pad(r.othersCpu === null ? '?' : `${r.othersCpu.toFixed(0)}%`, 10)}  ${its}`,
    );
  }
}

// ---------------------------------------------------------------------------------------------

async function main() {
  const dir = await mkdtemp(join(os.tmpdir(), 'cairn-bench-poll-'));
  const dataDir = join(dir, 'data');
  let server = null;
  let base = null;
  let jobId = null;
  const onSignal = (sig) => {
    if (server?.alive()) server.child.kill('SIGKILL');
    void rm(dir, { recursive: true, force: true }).finally(() => process.exit(sig === 'SIGINT' ? 130 : 143));
  };
  process.once('SIGINT', onSignal);
  process.once('SIGTERM', onSignal);
  try {
    const port = await freePort();
    const env = { ...process.env };
    delete env.REDIS_URL;
    Object.assign(env, {
      CAIRN_DATA_DIR: dataDir,
      CAIRN_PORT: String(port),
      CAIRN_HOST: '127.0.0.1',
      CAIRN_API_KEYS: `bench:${hashApiKey(API_KEY)}`,
      CAIRN_RATE_LIMIT_PER_MINUTE: env.CAIRN_RATE_LIMIT_PER_MINUTE ?? '10000000',
      CAIRN_SHUTDOWN_GRACE_SECONDS: env.CAIRN_SHUTDOWN_GRACE_SECONDS ?? '5',
    });
    const config = loadConfig(env); // a bad pass-through setting fails here, with its name
    const cores = os.availableParallelism();
    const threads = config.CAIRN_COMPUTE_THREADS || Math.max(1, cores - 1);
    const load = () => os.loadavg().map((v) => v.toFixed(2)).join(' ');
    console.log(`status-poll: ${CONNECTIONS} connections (closed loop), ${WARMUP} s warm-up + ${SECONDS} s per target; target p99(GET /v1/jobs/<id>) ≤ ${TARGET_P99_MS} ms while a selection runs`);
    console.log(`machine: ${cores} cores (${os.cpus()[0]?.model ?? '?'}), Node ${process.version}, load average at start ${load()}`);
    console.log(`server: node dist/cli/main.js serve (embedded queue), compute threads ${threads}${config.CAIRN_COMPUTE_THREADS ? ' (CAIRN_COMPUTE_THREADS)' : ' (default: cores − 1)'}, UV_THREADPOOL_SIZE ${env.UV_THREADPOOL_SIZE ?? '4 (default)'}, NODE_OPTIONS ${env.NODE_OPTIONS ? `"${env.NODE_OPTIONS}"` : '(none)'}`);
    console.log(`server config: API key auth on, rate limit ${config.CAIRN_RATE_LIMIT_PER_MINUTE ? `${config.CAIRN_RATE_LIMIT_PER_MINUTE}/min` : 'off'}, LOG_LEVEL ${config.LOG_LEVEL}; ${PIN ? 'pinned: server on core 0, load generator on core 1 (--pin)' : 'not pinned (the scheduler places all three: load generator, event loop, selection thread)'}`);

    // After the machine line: availableParallelism() counts the cores this process may use.
    if (PIN) {
      const own = spawnSync('taskset', ['-cp', '1', String(process.pid)], { encoding: 'utf8' });
      if (own.status !== 0) throw new Error(`--pin: taskset failed (${own.stderr.trim() || own.error?.message}); is util-linux installed?`);
    }

    // 1. Server.
    server = startServe(cli, root, env, PIN ? ['taskset', '-c', '0'] : []);
    serverPid = server.child.pid;
    base = `http://127.0.0.1:${port}`;
    await waitUntil('/readyz', 30_000, async () => {
      try {
        return (await fetch(`${base}/readyz`)).status === 200;
      } catch {
        return false;
      }
    }, server);

    // 2. Dataset and job.
    let t = Date.now();
    const npyPath = join(dir, 'status-poll.npy');
    const bytes = await writeNpyFloat32(npyPath, clusteredMatrix(ROWS, COLS, 42), ROWS, COLS);
    const form = new FormData();
    form.append('file', await openAsBlob(npyPath), 'status-poll.npy');
    form.append('name', 'status-poll bench');
    const up = await api(base, 'POST', '/v1/datasets', form);
    if (up.status !== 202) throw new Error(`upload answered ${up.status}: ${up.text.slice(0, 300)}`);
    const datasetId = up.body.id;
    const ds = await waitUntil('ingestion', 120_000, async () => {
      const r = await api(base, 'GET', `/v1/datasets/${datasetId}`);
      if (r.status !== 200) throw new Error(`GET dataset answered ${r.status}: ${r.text.slice(0, 300)}`);
      if (r.body.status === 'completed') return r.body;
      if (!['queued', 'running'].includes(r.body.status)) throw new Error(`ingestion ${r.body.status}: ${JSON.stringify(r.body.error)}`);
      return null;
    }, server);
    await rm(npyPath, { force: true });
    console.log(`dataset: ${ds.rows} × ${ds.cols} float32 (${(bytes / 1e6).toFixed(1)} MB .npy), uploaded and ingested in ${((Date.now() - t) / 1000).toFixed(1)} s`);

    const rows = [];
    if (IDLE) {
      // The same route with no selection running: a job cancelled at once has the same two files
      // (a completed one would also read summary.json).
      const idle = await api(base, 'POST', '/v1/jobs', { datasetId, k: K, seed: 1, maxIterations: 1_000_000, plateauTolerance: 0, name: 'status-poll idle' });
      if (idle.status !== 202) throw new Error(`POST /v1/jobs answered ${idle.status}: ${idle.text.slice(0, 300)}`);
      await api(base, 'POST', `/v1/jobs/${idle.body.id}/cancel`);
      await waitUntil('the idle job’s cancellation', 30_000, async () => (await jobState(base, idle.body.id)).status === 'cancelled', server);
      rows.push(await measure('GET /v1/jobs/<id> (no job runs)', base, `/v1/jobs/${idle.body.id}`, null));
      rows.push(await measure('GET /healthz (no job runs)', base, '/healthz', null));
    }

    t = Date.now();
    const created = await api(base, 'POST', '/v1/jobs', { datasetId, k: K, seed: 1, maxIterations: 1_000_000, plateauTolerance: 0, name: 'status-poll bench' });
    if (created.status !== 202) throw new Error(`POST /v1/jobs answered ${created.status}: ${created.text.slice(0, 300)}`);
    jobId = created.body.id;
    await waitUntil('the job to reach its descent', 180_000, async () => {
      const s = await jobState(base, jobId);
      if (s.status === 'running' && s.progress.phase === 'descent' && (s.progress.iteration ?? 0) > 0) return s;
      if (!['queued', 'running'].includes(s.status)) throw new Error(`job ${s.status} before its descent: ${JSON.stringify(s.error)}`);
      return null;
    }, server);
    console.log(`job: k = ${K}, maxIterations 1,000,000, plateauTolerance 0; in its descent after ${((Date.now() - t) / 1000).toFixed(1)} s`);

    // 3 and 4. Load.
    rows.push(await measure('GET /v1/jobs/<id> (job runs)', base, `/v1/jobs/${jobId}`, jobId));
    rows.push(await measure('GET /healthz (job runs)', base, '/healthz', jobId));
    const end = await jobState(base, jobId);

    console.log('');
    console.log('latency in ms (autocannon: whole ms, 2xx answers only); req/s counts 200 answers');
    printTable(rows);
    console.log('');
    const status = rows.find((r) => r.label === 'GET /v1/jobs/<id> (job runs)');
    const health = rows.find((r) => r.label === 'GET /healthz (job runs)');
    const ratio = (a, b) => (b > 0 ? (a / b).toFixed(2) : `∞ (peer ${b} ms)`);
    console.log(`p99(status) / p99(healthz) = ${status.p99} / ${health.p99} = ${ratio(status.p99, health.p99)};  req/s(status) / req/s(healthz) = ${(status.rps / health.rps).toFixed(2)}`);
    const bad = rows.filter((r) => r.non200 > 0 || r.errors > 0 || r.timeouts > 0);
    console.log(
      bad.length
        ? `NOT every answer was 200: ${bad.map((r) => `${r.label}: codes ${JSON.stringify(r.codes)}, ${r.errors} errors, ${r.timeouts} timeouts`).join('; ')}`
        : `every answer was 200 (${rows.reduce((s, r) => s + r.ok, 0)} requests, 0 errors)`,
    );
    const busy = rows.filter((r) => r.othersCpu !== null && r.othersCpu > 15);
    if (busy.length) console.log(`WARNING: other processes took CPU during ${busy.map((r) => `${r.label} (${r.othersCpu.toFixed(0)}%)`).join(', ')}: those rows are not representative; run again on a quiet machine`);
    const stillRunning = end.status === 'running' && end.progress.phase === 'descent';
    console.log(
      `job during the load: iteration ${iterOf(status.before)} at start, ${iterOf(end)} at end; ${stillRunning ? 'still running in its descent at the end (the selection ran throughout)' : `NOT running at the end: ${end.status} / ${end.progress.phase}`}`,
    );
    console.log(`p99 target ≤ ${TARGET_P99_MS} ms for GET /v1/jobs/<id>: ${status.p99 <= TARGET_P99_MS ? 'met' : 'MISSED'} (p99 ${status.p99} ms); load average at end ${load()}`);

    // 5. Clean up.
    const cancel = await api(base, 'POST', `/v1/jobs/${jobId}/cancel`);
    if (cancel.status !== 202) console.log(`cancel answered ${cancel.status}: ${cancel.text.slice(0, 200)}`);
    else {
      const final = await waitUntil('the cancellation', 20_000, async () => {
        const s = await jobState(base, jobId);
        return ['queued', 'running'].includes(s.status) ? null : s;
      }, server).catch((err) => ({ status: `unknown (${err.message})` }));
      console.log(`job ${final.status} after the cancel`);
    }
    const how = await stopServe(server, 30_000);
    console.log(`server stopped (${how.signal ? `signal ${how.signal}` : `exit code ${how.code}`})`);
    if (!stillRunning || bad.length) process.exitCode = 1;
  } catch (err) {
    process.exitCode = 1;
    console.error(`status-poll failed: ${err instanceof Error ? err.message : String(err)}`);
    if (server?.tail.length) console.error(`last server output:\n${server.tail.join('\n')}`);
    if (server?.alive()) {
      server.child.kill('SIGKILL');
      await server.exited;
    }
  } finally {
    await rm(dir, { recursive: true, force: true });
  }
}

await main();

#!/usr/bin/env node
// Throughput of the ONNX kernels against numpy's float32 GEMM on the same shapes, in one run.
// Usage: npm run build && node scripts/bench/kernel-gflops.mjs [--runs 7] [--rounds 3] [--threads N]
// (--threads sets both ORT's intra-op threads and numpy's OPENBLAS_NUM_THREADS; default: all cores)
//
// Each round runs the numpy child and then every ONNX operation, each timed as the median of
// --runs runs after warm-up calls; the best round's median is reported for every row. Neighbours on
// a shared machine come and go, so rounds spread over time and the best one is the least disturbed
// for both sides alike (the load average is printed for judging the figures).
//
// Flop counts are those of the matrix products only (2·B·k·d each): one product for sqDistances,
// gemm and assign, two for dataTerm (X·Pᵀ for the distances, G·X for the gradient). Elementwise
// kernel work and the reductions are not counted, so they show up as lost GFLOP/s.
import { spawnSync } from 'node:child_process';
import os from 'node:os';
import { performance } from 'node:perf_hooks';
import { OnnxBackend } from '../../dist/compute/onnx-backend.js';
import { prepareRows } from '../../dist/compute/prepared-rows.js';
import { ReferenceBackend } from '../../dist/compute/reference-backend.js';

const B = 8192;
const K = 1000;
const D = 256;
const flag = (name, fallback) => {
  const i = process.argv.indexOf(name);
  return i > 0 ? Number(process.argv[i + 1]) : fallback;
};
const RUNS = Math.max(5, flag('--runs', 7));
const ROUNDS = Math.max(1, flag('--rounds', 3));
const THREADS = flag('--threads', os.availableParallelism());
const PRODUCT = 2 * B * K * D;

function mulberry32(seed) {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = Math.imul(a ^ (a >>> 15), a | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}
const rnd = mulberry32(7);
const randomMatrix = (rows, cols) => Float32Array.from({ length: rows * cols }, () => rnd() * 2 - 1);

// Five warm-up calls, not one: the first few calls still page-fault fresh output buffers until
// glibc's adaptive mmap threshold has grown past their size (visible as ~1800 minor faults a call),
// and the service runs in that steady state.
async function timeIt(fn, runs = RUNS) {
  for (let i = 0; i < 5; i++) await fn();
  const ms = [];
  for (let i = 0; i < runs; i++) {
    const t0 = performance.now();
    await fn();
    ms.push(performance.now() - t0);
  }
  ms.sort((a, b) => a - b);
  return { median: ms[Math.floor(ms.length / 2)], min: ms[0], max: ms[ms.length - 1] };
}

const fmt = (v, digits = 1) => v.toFixed(digits).padStart(7);
const gflops = (flops, ms) => flops / ms / 1e6;

// numpy peer. The environment may pin OpenBLAS (OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE) to an older
// core's kernels and cache size; both are removed together, for this child only, so numpy runs
// the kernels it would pick on this CPU by itself.
const NUMPY = String.raw`
import json, sys, time
import numpy as np
B, K, D, RUNS = (int(v) for v in sys.argv[1:5])
rng = np.random.default_rng(7)
X = rng.random((B, D), dtype=np.float32) * 2 - 1
P = rng.random((K, D), dtype=np.float32) * 2 - 1
def med(fn):
    for _ in range(5): fn()
    ts = []
    for _ in range(RUNS):
        t0 = time.perf_counter(); fn(); ts.append((time.perf_counter() - t0) * 1e3)
    ts.sort()
    return ts[len(ts) // 2]
def energy_term(a=1.0):
    xx = np.einsum('ij,ij->i', X, X)[:, None]; pp = np.einsum('ij,ij->i', P, P)[None, :]
    S = np.sqrt(np.maximum(xx + pp - 2 * (X @ P.T), 0) + np.float32(a * a))
    G = 1 / S
    return (S - a).sum(0), G.sum(0), G.T @ X
info = []
try:
    from threadpoolctl import threadpool_info
    info = [{k: v for k, v in d.items() if k in ('internal_api', 'version', 'num_threads', 'architecture', 'filepath')} for d in threadpool_info()]
except Exception as e:
    import io, contextlib
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        np.show_config()
    info = [{'show_config': buf.getvalue()}]
print(json.dumps({'numpy': np.__version__, 'blas': info, 'sgemm_ms': med(lambda: X @ P.T), 'energy_term_ms': med(energy_term)}))
`;

function numpyPeer() {
  const env = { ...process.env };
  delete env.OPENBLAS_CORETYPE;
  delete env.OPENBLAS_L2_SIZE;
  env.OPENBLAS_NUM_THREADS = String(THREADS);
  const r = spawnSync('/usr/bin/python3', ['-c', NUMPY, String(B), String(K), String(D), String(RUNS)], { env, encoding: 'utf8' });
  if (r.status !== 0) throw new Error(`numpy peer failed (is python3-numpy installed?): ${r.stderr || r.error}`);
  return JSON.parse(r.stdout.trim().split('\n').pop());
}

const pinned = ['OPENBLAS_CORETYPE', 'OPENBLAS_L2_SIZE'].filter((v) => process.env[v] !== undefined);
const load = () => os.loadavg().map((v) => v.toFixed(2)).join(' ');
console.log(`kernel-gflops: B×k×d = ${B}×${K}×${D}; per round the median of ${RUNS} runs after 5 warm-up calls; best of ${ROUNDS} rounds`);
console.log(`machine: ${os.availableParallelism()} cores (${os.cpus()[0]?.model ?? '?'}), ${THREADS} thread(s) on each side, load average at start ${load()}`);
console.log(`numpy peer: /usr/bin/python3, ${pinned.length ? `unset for the child only: ${pinned.map((v) => `${v}=${process.env[v]}`).join(', ')}` : 'no OPENBLAS_* overrides in the environment'}`);

const x = randomMatrix(B, D);
const p = randomMatrix(K, D);
const onnx = await OnnxBackend.create({ minWork: 0, threads: THREADS });
const energy = { kind: 'energy', a: 1 };
const gaussian = { kind: 'gaussian', sigma: 8 };
// The descent passes rows prepared once as [x, |x|², 1]; the plain form builds them per call.
const xPrepared = prepareRows(x, B, D);
await onnx.warmUp([{ n: B, k: K, d: D }], ['sqDistances', 'gemm:nt', 'assign', 'dataTerm:energy', 'dataTerm:gaussian', 'dataTermPrepared:energy']);
const ops = [
  ['dataTerm energy (2 products)', 2 * PRODUCT, () => onnx.dataTerm(x, B, p, K, D, energy)],
  ['dataTerm energy, prepared rows', 2 * PRODUCT, () => onnx.dataTermPrepared(xPrepared, B, p, K, D, energy)],
  ['dataTerm gaussian (2 products)', 2 * PRODUCT, () => onnx.dataTerm(x, B, p, K, D, gaussian)],
  ['assign (product + argmin)', PRODUCT, () => onnx.assign(x, B, p, K, D)],
  ['sqDistances (returns B×k)', PRODUCT, () => onnx.sqDistances(x, B, p, K, D)],
  ['gemm X·Pᵀ (returns B×k)', PRODUCT, () => onnx.gemm(x, B, D, p, K, D, false, true)],
];
const best = ops.map(() => ({ median: Infinity, min: Infinity }));
const npRounds = [];
for (let round = 0; round < ROUNDS; round++) {
  npRounds.push(numpyPeer());
  for (const [i, [, , fn]] of ops.entries()) {
    const t = await timeIt(fn);
    best[i] = { median: Math.min(best[i].median, t.median), min: Math.min(best[i].min, t.min) };
  }
}
await onnx.dispose();

const np = npRounds[0];
const npMs = Math.min(...npRounds.map((r) => r.sgemm_ms));
const npGflops = gflops(PRODUCT, npMs);
const npEnergyMs = Math.min(...npRounds.map((r) => r.energy_term_ms));

console.log(`numpy ${np.numpy}, BLAS: ${JSON.stringify(np.blas)}`);
console.log('');
console.log(`${'operation'.padEnd(36)} ${'ms'.padStart(7)} ${'min'.padStart(7)} ${'GFLOP/s'.padStart(7)}  onnx/numpy`);
console.log(`${'numpy sgemm X @ P.T'.padEnd(36)} ${fmt(npMs)} ${''.padStart(7)} ${fmt(npGflops)}  (round medians: ${npRounds.map((r) => r.sgemm_ms.toFixed(1)).join(', ')} ms)`);
for (const [i, [label, flops]] of ops.entries()) {
  const g = gflops(flops, best[i].median);
  console.log(`${('onnx ' + label).padEnd(36)} ${fmt(best[i].median)} ${fmt(best[i].min)} ${fmt(g)}  ${(g / npGflops).toFixed(2)}×`);
}
const energyMs = best[0].median;
console.log(`${'numpy energy data term (float32)'.padEnd(36)} ${fmt(npEnergyMs)} ${''.padStart(7)} ${fmt(gflops(2 * PRODUCT, npEnergyMs))}  (onnx dataTerm energy: ${(npEnergyMs / energyMs).toFixed(2)}× its speed)`);

// The plain-JS reference, for context, on a shape it finishes in reasonable time.
const [rb, rk, rd] = [1024, 100, 64];
const ref = new ReferenceBackend();
const rx = randomMatrix(rb, rd);
const rp = randomMatrix(rk, rd);
const rs = await timeIt(() => ref.sqDistances(rx, rb, rp, rk, rd), 5);
const rt = await timeIt(() => ref.dataTerm(rx, rb, rp, rk, rd, energy), 5);
console.log('');
console.log(`reference (plain JS, float64) at ${rb}×${rk}×${rd}: sqDistances ${fmt(rs.median)} ms = ${fmt(gflops(2 * rb * rk * rd, rs.median), 2)} GFLOP/s; dataTerm energy ${fmt(rt.median)} ms = ${fmt(gflops(4 * rb * rk * rd, rt.median), 2)} GFLOP/s`);
console.log(`load average at end ${load()}`);

#!/usr/bin/env node
// cairn vs a MiniBatchKMeans peer at scale: 1,000,000 × 128 float32 rows from a 64-Gaussian mixture.
// Usage: node scripts/bench/scale-select.mjs [--rows 1000000] [--k 256] [--seed 0] [--sample 20000] [--budget-mb 256] [--no-build]
//
// cairn runs twice: with its default memory budget (the rows held in memory), and with
// --memory-budget (default 256 MiB; 0 skips that run), where the rows stay in their file and are
// read in blocks. Targets of the second run: peak RSS < 600 MB, D² within 5% of the first.
//
// As in mnist-select.mjs, both tools run as whole child processes on the same .npy (wall time from
// spawn to exit, peak RSS), and both picks are scored here with the same code: cairn's D² functions
// from dist/ (ONNX backend), against a common seeded random sample of the rows, with the energy
// kernel at cairn's own scale (kernel.a from cairn's result JSON).
import { rmSync } from 'node:fs';
import { readFile } from 'node:fs/promises';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { measureProcess, hasGnuTime } from './lib/measure.mjs';
import { writeNpyFloat32 } from './lib/npy.mjs';
import { buildDist, loadavg, machineLine, snapshotDist, uptime } from './lib/machine.mjs';
import { describeMixture, MIXTURE_COMPONENTS, mixtureMatrix } from './lib/mixture.mjs';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..');
const PEER = join(ROOT, 'scripts', 'bench', 'scale-peer.py');
const PYTHON = '/usr/bin/python3';
const TARGETS = { wall: 1.0, rss: 0.5, d2: 1.0 };
const BUDGET_TARGETS = { rssMb: 600, d2Change: 0.05 };

const argv = process.argv.slice(2);
const flag = (name) => argv.includes(name);
const option = (name, fallback) => {
  const i = argv.indexOf(name);
  return i >= 0 ? Number(argv[i + 1]) : fallback;
};
const N = option('--rows', 1_000_000);
const D = 128;
const COMPONENTS = MIXTURE_COMPONENTS;
const K = option('--k', 256);
const SEED = option('--seed', 0);
const SAMPLE = Math.min(option('--sample', 20_000), N);
const BUDGET_MB = option('--budget-mb', 256);


// --- build (as mnist-select.mjs) ---------------------------------------------------------------
if (!flag('--no-build')) buildDist(ROOT);

// Private snapshot of dist/ so a concurrent rebuild cannot change cairn mid-bench.
const { work, cli: CLI, dist } = await snapshotDist(ROOT, 'scale');
for (const sig of ['SIGINT', 'SIGTERM']) process.on(sig, () => process.exit(130));
const { DenseRows } = await dist('core/rows.js');
const { constantTerm, dataTermMeans, discrepancyFromTerms } = await dist('core/discrepancy.js');
const { selfTerm } = await dist('core/descent.js');
const { Rng } = await dist('core/random.js');
const { OnnxBackend } = await dist('compute/onnx-backend.js');

// --- data: mixture of 64 Gaussians (lib/mixture.mjs) ---------------------------------------------
const tGen = Date.now();
const data = mixtureMatrix(Rng, { rows: N, cols: D, seed: SEED, components: COMPONENTS });
const npyPath = join(work, 'data.npy');
const npyBytes = await writeNpyFloat32(npyPath, data, N, D);
const genSeconds = (Date.now() - tGen) / 1000;

const peerEnv = { ...process.env };
const unpinned = ['OPENBLAS_CORETYPE', 'OPENBLAS_L2_SIZE'].filter((v) => peerEnv[v] !== undefined);
for (const v of ['OPENBLAS_CORETYPE', 'OPENBLAS_L2_SIZE']) delete peerEnv[v];

console.log(`scale-select bench: ${N} × ${D} float32, ${describeMixture(COMPONENTS)} → ${(npyBytes / 2 ** 20).toFixed(1)} MiB .npy (generated in ${genSeconds.toFixed(1)} s)`);
console.log(machineLine());
console.log(`k ${K}, seed ${SEED}, scoring sample ${SAMPLE} rows; peak RSS via ${hasGnuTime() ? 'GNU time -v' : '/proc VmHWM polling'}`);
console.log(`peer: ${PYTHON} ${PEER}; ${unpinned.length ? `unset for the peer only: ${unpinned.join(', ')}` : 'no OPENBLAS_* pins in the environment'}`);
console.log('');

// --- timed runs --------------------------------------------------------------------------------
const cairnOut = join(work, 'cairn.json');
const peerOut = join(work, 'peer.json');
const loadCairn = uptime();
const mc = await measureProcess(process.execPath, [CLI, 'select', npyPath, '--k', String(K), '--out', cairnOut, '--quiet'], { cwd: ROOT });
if (mc.code !== 0) throw new Error(`cairn exited with ${mc.code}:\n${mc.stderr}`);
const cairn = JSON.parse(await readFile(cairnOut, 'utf8'));
console.log(`cairn: wall ${mc.wallSeconds.toFixed(2)} s, peak RSS ${mc.peakRssMb.toFixed(0)} MB | before: ${loadCairn}`);
let budgeted = null;
if (BUDGET_MB > 0) {
  const out = join(work, 'cairn-budget.json');
  const loadBudget = uptime();
  const m = await measureProcess(process.execPath, [CLI, 'select', npyPath, '--k', String(K), '--out', out, '--quiet', '--memory-budget', String(BUDGET_MB)], { cwd: ROOT });
  if (m.code !== 0) throw new Error(`cairn --memory-budget exited with ${m.code}:\n${m.stderr}`);
  budgeted = { m, result: JSON.parse(await readFile(out, 'utf8')) };
  console.log(`cairn --memory-budget ${BUDGET_MB}: wall ${m.wallSeconds.toFixed(2)} s, peak RSS ${m.peakRssMb.toFixed(0)} MB | before: ${loadBudget}`);
}
const loadPeer = uptime();
const mp = await measureProcess(PYTHON, [PEER, npyPath, String(K), String(SEED), peerOut], { cwd: ROOT, env: peerEnv });
if (mp.code !== 0) throw new Error(`peer exited with ${mp.code}:\n${mp.stderr}`);
const peer = JSON.parse(await readFile(peerOut, 'utf8'));
console.log(`peer:  wall ${mp.wallSeconds.toFixed(2)} s, peak RSS ${mp.peakRssMb.toFixed(0)} MB | before: ${loadPeer}`);
rmSync(npyPath, { force: true });
console.log('');

// --- scoring (same code for both) ----------------------------------------------------------------
const full = new DenseRows(data, N, D);
const sampleIdx = new Rng(SEED + 1).sample(N, SAMPLE);
const sample = new DenseRows(full.gather(sampleIdx), SAMPLE, D);
const backend = await OnnxBackend.create();
const kernel = { kind: 'energy', a: cairn.kernel.a };
const constant = await constantTerm(sample, backend, kernel, new Rng(SEED));

async function d2(indices, weights) {
  const k = indices.length;
  const sum = weights.reduce((s, w) => s + w, 0);
  const w = Float64Array.from(weights, (v) => v / sum);
  const points = full.gather(indices);
  const c = await dataTermMeans(sample, backend, kernel, points, k);
  const { K: Kmat } = await selfTerm(backend, kernel, points, w, k, D, false);
  return discrepancyFromTerms(c, Kmat, w, constant.value);
}
const d2Cairn = await d2(cairn.representatives.map((r) => r.index), cairn.representatives.map((r) => r.weight));
const d2Peer = await d2(peer.indices, peer.weights);
const d2Budget = budgeted ? await d2(budgeted.result.representatives.map((r) => r.index), budgeted.result.representatives.map((r) => r.weight)) : NaN;
const randomIdx = Array.from(new Rng(SEED + 2).sample(N, K));
const d2Random = await d2(randomIdx, new Array(K).fill(1 / K));
await backend.dispose();

const distinct = (a) => new Set(a).size;
const f = (v, d = 4) => (Number.isFinite(v) ? (Math.abs(v) < 1e-3 && v !== 0 ? v.toExponential(3) : v.toFixed(d)) : 'n/a');
const row = (...c) => console.log(`  ${String(c[0]).padEnd(8)} ${String(c[1]).padStart(10)} ${String(c[2]).padStart(14)} ${String(c[3]).padStart(14)} ${String(c[4]).padStart(12)}`);
console.log(`scoring: energy kernel a = ${kernel.a.toPrecision(6)} (cairn's; scale s = ${Number(cairn.scale).toPrecision(6)}), D² against the ${SAMPLE}-row sample (constant exact: ${constant.exact})`);
row('tool', 'wall s', 'peak RSS MB', 'D² (sample)', 'distinct');
row('cairn', f(mc.wallSeconds, 2), f(mc.peakRssMb, 0), f(d2Cairn, 5), distinct(cairn.representatives.map((r) => r.index)));
if (budgeted) row(`cairn ${BUDGET_MB}M`, f(budgeted.m.wallSeconds, 2), f(budgeted.m.peakRssMb, 0), f(d2Budget, 5), distinct(budgeted.result.representatives.map((r) => r.index)));
row('peer', f(mp.wallSeconds, 2), f(mp.peakRssMb, 0), f(d2Peer, 5), distinct(peer.indices));
row('random', '', '', f(d2Random, 5), K);
console.log('');
const ratios = [
  ['wall', mc.wallSeconds / mp.wallSeconds, TARGETS.wall],
  ['RSS', mc.peakRssMb / mp.peakRssMb, TARGETS.rss],
  ['D²', d2Cairn / d2Peer, TARGETS.d2],
];
console.log('ratios cairn/peer:');
for (const [name, v, t] of ratios) console.log(`  ${name.padEnd(5)} ${f(v, 3).padStart(8)}  (target ≤ ${t.toFixed(1)})  ${v <= t ? 'met' : 'MISSED'}`);
if (budgeted) {
  const change = Math.abs(d2Budget - d2Cairn) / d2Cairn;
  console.log(`memory budget ${BUDGET_MB} MiB vs held in memory:`);
  console.log(`  peak RSS ${f(budgeted.m.peakRssMb, 0).padStart(8)} MB  (target < ${BUDGET_TARGETS.rssMb})  ${budgeted.m.peakRssMb < BUDGET_TARGETS.rssMb ? 'met' : 'MISSED'}`);
  console.log(`  D² change ${f(100 * change, 2).padStart(7)} %   (target ≤ ${100 * BUDGET_TARGETS.d2Change})  ${change <= BUDGET_TARGETS.d2Change ? 'met' : 'MISSED'}; own full-data D² ${f(budgeted.result.discrepancy?.value, 6)} vs ${f(cairn.discrepancy?.value, 6)}`);
  console.log(`  wall ${f(budgeted.m.wallSeconds / mc.wallSeconds, 3)}× the in-memory run; trace.seconds: ${Object.entries(budgeted.result.trace?.seconds ?? {}).map(([p, v]) => `${p} ${v.toFixed(2)}`).join(', ')}`);
}
console.log('');
const secs = cairn.trace?.seconds ?? {};
const inSelect = Object.values(secs).reduce((s, v) => s + v, 0);
console.log(`cairn trace.seconds: ${Object.entries(secs).map(([p, v]) => `${p} ${v.toFixed(2)}`).join(', ')}`);
console.log(`  in select() ${inSelect.toFixed(2)} s; outside (node start, imports, .npy ingest, JSON out) ${(mc.wallSeconds - inSelect).toFixed(2)} s; iterations ${cairn.trace?.iterations}, stop ${cairn.trace?.stopReason}, swaps ${cairn.trace?.swaps}`);
console.log(`  cairn's own D² ${f(cairn.discrepancy?.value, 6)} (full data); own ratioToRandom ${f(cairn.discrepancy?.ratioToRandom, 3)}`);
console.log(`peer seconds: ${Object.entries(peer.seconds).map(([p, v]) => `${p} ${v.toFixed(2)}`).join(', ')}; n_iter ${peer.n_iter}, n_steps ${peer.n_steps}; ${JSON.stringify(peer.versions)}`);
console.log(`load average now: ${loadavg()} (${uptime()})`);

#!/usr/bin/env node
// Ingestion benchmark: throughput (MB/s of source file) and peak memory of the dataset store.
// Run `npm run build` first: this imports the compiled store from dist/.
//
//   node scripts/bench/ingest-vectors.mjs [--rows 1000000] [--csv-rows 100000] [--cols 128]
//
// Generates, in a temp folder, a rows × cols float32 .npy (1 M × 128 ≈ 512 MB) and the first
// csv-rows rows of the same data as CSV (100 k rows ≈ 120 MB: the full 1 M rows would be about
// 1.2 GB of text, and CSV parsing is the slower path, so the CSV run is smaller), ingests each in
// its own child process, and prints MB/s and peak RSS above that process's baseline (VmHWM minus
// VmRSS measured after the imports, before ingestion). Target: .npy peak < 300 MB above baseline.
// The temp folder is removed afterwards, also on failure.
import { execFileSync } from 'node:child_process';
import { createWriteStream, readFileSync } from 'node:fs';
import { mkdtemp, rm, stat } from 'node:fs/promises';
import { once } from 'node:events';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';

const MB = 1e6;
const here = fileURLToPath(import.meta.url);
const dist = new URL('../../dist/data/', import.meta.url);

function memoryKb(field) {
  const line = readFileSync('/proc/self/status', 'utf8').split('\n').find((l) => l.startsWith(field + ':'));
  return line ? Number(line.split(/\s+/)[1]) : NaN;
}

async function child(path, storeDir) {
  const { ingestFile } = await import(new URL('dataset-store.js', dist).href);
  const { defaultReadOptions } = await import(new URL('read-options.js', dist).href);
  const baselineKb = memoryKb('VmRSS');
  const started = process.hrtime.bigint();
  const meta = await ingestFile(path, { storeDir, datasetId: 'bench', options: defaultReadOptions() });
  const seconds = Number(process.hrtime.bigint() - started) / 1e9;
  const peakKb = memoryKb('VmHWM');
  process.stdout.write(JSON.stringify({ rows: meta.rows, cols: meta.cols, bytes: meta.sourceBytes, seconds, baselineKb, peakKb }));
}

/** Deterministic values (xorshift), so runs are comparable. */
function* chunks(rows, cols, rowsPerChunk) {
  let s = 0x9e3779b9;
  for (let start = 0; start < rows; start += rowsPerChunk) {
    const n = Math.min(rowsPerChunk, rows - start);
    const out = new Float32Array(n * cols);
    for (let i = 0; i < out.length; i++) {
      s ^= s << 13;
      s ^= s >>> 17;
      s ^= s << 5;
      out[i] = ((s >>> 0) / 4294967296) * 2 - 1;
    }
    yield out;
  }
}

async function write(stream, data) {
  if (!stream.write(data)) await once(stream, 'drain');
}

async function writeNpy(path, rows, cols) {
  const stream = createWriteStream(path);
  let dict = `{'descr': '<f4', 'fortran_order': False, 'shape': (${rows}, ${cols}), }`;
  dict += ' '.repeat(63 - ((10 + dict.length) % 64)) + '\n';
  const prefix = Buffer.alloc(10);
  prefix.write('\x93NUMPY', 'latin1');
  prefix[6] = 1;
  prefix.writeUInt16LE(dict.length, 8);
  await write(stream, Buffer.concat([prefix, Buffer.from(dict, 'latin1')]));
  for (const chunk of chunks(rows, cols, 8192)) await write(stream, Buffer.from(chunk.buffer));
  stream.end();
  await once(stream, 'finish');
}

async function writeCsv(path, rows, cols) {
  const stream = createWriteStream(path);
  await write(stream, Array.from({ length: cols }, (_, j) => `f${j}`).join(',') + '\n');
  for (const chunk of chunks(rows, cols, 2048)) {
    let text = '';
    for (let r = 0; r < chunk.length / cols; r++) {
      const cells = [];
      for (let j = 0; j < cols; j++) cells.push(chunk[r * cols + j].toFixed(6));
      text += cells.join(',') + '\n';
    }
    await write(stream, text);
  }
  stream.end();
  await once(stream, 'finish');
}

function run(label, path, storeDir) {
  const out = execFileSync(process.execPath, [here, '--child', path, storeDir], { encoding: 'utf8', maxBuffer: 1 << 20 });
  const r = JSON.parse(out);
  const peakAboveMb = ((r.peakKb - r.baselineKb) * 1024) / MB;
  console.log(
    `${label.padEnd(5)} ${String(r.rows).padStart(8)} × ${r.cols}  ${(r.bytes / MB).toFixed(1).padStart(7)} MB  ` +
      `${r.seconds.toFixed(2).padStart(6)} s  ${(r.bytes / MB / r.seconds).toFixed(1).padStart(7)} MB/s  ` +
      `peak RSS +${peakAboveMb.toFixed(1)} MB above baseline (${((r.baselineKb * 1024) / MB).toFixed(1)} MB)`,
  );
  return peakAboveMb;
}

async function main() {
  const arg = (name, fallback) => {
    const i = process.argv.indexOf(name);
    return i >= 0 ? Number(process.argv[i + 1]) : fallback;
  };
  const rows = arg('--rows', 1_000_000);
  const csvRows = arg('--csv-rows', 100_000);
  const cols = arg('--cols', 128);
  const dir = await mkdtemp(join(tmpdir(), 'cairn-bench-ingest-'));
  try {
    const npy = join(dir, 'vectors.npy');
    const csv = join(dir, 'vectors.csv');
    const t = Date.now();
    await writeNpy(npy, rows, cols);
    await writeCsv(csv, csvRows, cols);
    console.log(`generated ${(await stat(npy)).size} B .npy and ${(await stat(csv)).size} B .csv in ${((Date.now() - t) / 1000).toFixed(1)} s`);
    const npyPeak = run('npy', npy, join(dir, 'store-npy'));
    run('csv', csv, join(dir, 'store-csv'));
    console.log(`npy peak RSS target < 300 MB above baseline: ${npyPeak < 300 ? 'met' : 'MISSED'}`);
  } finally {
    await rm(dir, { recursive: true, force: true });
  }
}

if (process.argv[2] === '--child') await child(process.argv[3], process.argv[4]);
else await main();

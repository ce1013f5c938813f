#!/usr/bin/env node
// Image-archive ingestion benchmark. Generates a tar.gz of demo pictures (scripts/demo-data.mjs)
// in a temp folder, then ingests it from the built reader (run `npm run build` first) in a fresh
// child process per mode, so each peak RSS is that mode's alone:
//   features — dist/data/tar-reader.js into a counting sink without writeThumbnail
//   sink     — the same sink taking thumbnails (reader + decode + thumbnail PNGs)
//   store    — dist/data/dataset-store.js ingestFile into a temp store (adds disk writes), if built
// Image options are the service defaults (dist/data/read-options.js when built): 32 px RGB
// features and 128 px thumbnails.
// Usage: node scripts/bench/ingest-images.mjs [--count 10000] [--seed 7] [--archive existing.tar.gz]
import { spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { performance } from 'node:perf_hooks';
import { fileURLToPath, pathToFileURL } from 'node:url';

const dist = fileURLToPath(new URL('../../dist/data/', import.meta.url));
const demoScript = fileURLToPath(new URL('../demo-data.mjs', import.meta.url));
const self = fileURLToPath(import.meta.url);
const load = (name) => import(pathToFileURL(join(dist, name)).href);

const FALLBACK_IMAGE = { size: 32, color: 'rgb', fit: 'cover', onBadImage: 'skip', thumbnailSize: 128 };

async function readOptions() {
  if (existsSync(join(dist, 'read-options.js'))) return (await load('read-options.js')).defaultReadOptions();
  const limits = {
    maxFileBytes: 8 * 1024 ** 3,
    maxRows: 50_000_000,
    maxCols: 65_536,
    maxEntries: 1_000_000,
    maxUncompressedBytes: 16 * 1024 ** 3,
    maxEntryBytes: 64 * 1024 ** 2,
    maxImagePixels: 40_000_000,
  };
  return { limits, nonFinite: 'fail', scaleUint8: true, image: FALLBACK_IMAGE };
}

/** Child: one ingestion, reported as one JSON line. */
async function child(mode, archive) {
  const options = await readOptions();
  const started = performance.now();
  let rows;
  let skipped;
  if (mode !== 'store') {
    const { tarReader } = await load('tar-reader.js');
    let thumbnailBytes = 0;
    const sink = { begin: async () => {}, writeRows: async () => {} };
    if (mode === 'sink') {
      sink.writeThumbnail = async (_row, png) => {
        thumbnailBytes += png.length;
      };
    }
    const summary = await tarReader.read(archive, sink, options);
    [rows, skipped] = [summary.rows, summary.skippedImages];
    if (mode === 'sink' && thumbnailBytes === 0) throw new Error('no thumbnails were written');
  } else {
    const { ingestFile } = await load('dataset-store.js');
    const storeDir = mkdtempSync(join(tmpdir(), 'cairn-bench-store-'));
    try {
      const meta = await ingestFile(archive, { storeDir, datasetId: 'bench', options });
      [rows, skipped] = [meta.rows, meta.skippedImages];
    } finally {
      rmSync(storeDir, { recursive: true, force: true });
    }
  }
  const seconds = (performance.now() - started) / 1000;
  const peakRssMiB = process.resourceUsage().maxRSS / 1024;
  console.log(JSON.stringify({ mode, rows, skipped, seconds, peakRssMiB, image: options.image }));
}

function parent(argv) {
  const flag = (name, fallback) => {
    const i = argv.indexOf(name);
    return i >= 0 ? Number(argv[i + 1]) : fallback;
  };
  const count = flag('--count', 10_000);
  const seed = flag('--seed', 7);
  if (!existsSync(join(dist, 'tar-reader.js'))) {
    console.error('dist/data/tar-reader.js is missing: run `npm run build` first.');
    process.exit(1);
  }
  const given = argv.includes('--archive') ? argv[argv.indexOf('--archive') + 1] : null;
  const work = mkdtempSync(join(tmpdir(), 'cairn-bench-images-'));
  try {
    let archive = given;
    if (!archive) {
      const t0 = performance.now();
      archive = join(work, 'parts-images.tar.gz');
      const gen = spawnSync(process.execPath, [demoScript, '--count', String(count), '--seed', String(seed), '--out', work, '--no-vectors'], {
        stdio: ['ignore', 'ignore', 'inherit'],
      });
      if (gen.status !== 0) throw new Error('generating the archive failed');
      console.log(`archive: ${count} demo images generated in ${((performance.now() - t0) / 1000).toFixed(1)} s`);
    }
    const mib = statSync(archive).size / 1024 ** 2;
    console.log(`archive: ${mib.toFixed(1)} MiB tar.gz`);
    const modes = existsSync(join(dist, 'dataset-store.js')) ? ['features', 'sink', 'store'] : ['features', 'sink'];
    for (const mode of modes) {
      const run = spawnSync(process.execPath, [self, '--child', mode, archive], { encoding: 'utf8', stdio: ['ignore', 'pipe', 'inherit'] });
      if (run.status !== 0) throw new Error(`${mode} run failed`);
      const r = JSON.parse(run.stdout.trim().split('\n').pop());
      const what = { features: 'tarReader → counting sink, no thumbnails', sink: 'tarReader → counting sink + thumbnails', store: 'ingestFile → dataset store' }[mode];
      console.log(
        `${what}: ${r.rows} rows (${r.skipped} skipped) in ${r.seconds.toFixed(2)} s = ${(r.rows / r.seconds).toFixed(0)} images/s, ` +
          `${(mib / r.seconds).toFixed(1)} MiB/s compressed, peak RSS ${r.peakRssMiB.toFixed(0)} MiB ` +
          `(features ${r.image.size}px ${r.image.color}, fit ${r.image.fit}${mode === 'features' ? '' : `, thumbnails ${r.image.thumbnailSize}px`})`,
      );
    }
  } finally {
    rmSync(work, { recursive: true, force: true });
  }
}

const argv = process.argv.slice(2);
if (argv[0] === '--child') {
  child(argv[1], argv[2]).catch((err) => {
    console.error(err instanceof Error ? `${err.name}: ${err.message}` : err);
    process.exit(1);
  });
} else {
  try {
    parent(argv);
  } catch (err) {
    console.error(err instanceof Error ? err.message : err);
    process.exit(1);
  }
}

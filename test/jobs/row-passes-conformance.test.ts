import { mkdtempSync, readdirSync, rmSync, utimesSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { createBackend } from '../../src/compute/create-backend.js';
import type { KernelSpec } from '../../src/compute/kernel-spec.js';
import { Rng } from '../../src/core/random.js';
import { localPasses, PASS_BLOCK_ROWS, passRanges, type RowPasses } from '../../src/core/row-passes.js';
import { select } from '../../src/core/select.js';
import { parseSpace, prepareSpace, type PreparedSpace } from '../../src/core/space.js';
import { ingestFile, openDataset } from '../../src/data/dataset-store.js';
import { defaultReadOptions } from '../../src/data/read-options.js';
import { passProcessor, shardedPasses, type PassRecord } from '../../src/jobs/pass-shards.js';
import { TaskStore } from '../../src/jobs/task-store.js';
import type { PassSpec, TaskRef } from '../../src/jobs/task.js';
import { npyOf } from './task-fixtures.js';

/**
 * Every RowPasses returns exactly what localPasses returns: the sharded passes whether other
 * workers compute shards, nobody does (the job computes all), or a claimant dies mid-shard.
 * Rows: 5 whole blocks and a partial one, so shards of 2 blocks leave a short last shard.
 */
const ROWS = 5 * PASS_BLOCK_ROWS + 1234;
const COLS = 6;
const tenant = 'acme';
const datasetId = 'passes';

let dir: string;
let store: TaskStore;
let backend: ComputeBackend;
const parent: TaskRef = { kind: 'job', tenant, id: 'job-passes' };

/** Eight clusters in 6-D with a few exact duplicates (ties in distance). */
function matrix(): Float32Array {
  const rng = new Rng(17);
  const m = new Float32Array(ROWS * COLS);
  for (let i = 0; i < ROWS; i++) for (let t = 0; t < COLS; t++) m[i * COLS + t] = (t === i % 8 ? 4 : 0) + rng.normal();
  for (let i = 1; i < 40; i++) m.copyWithin(i * 2000 * COLS, 0, COLS);
  return m;
}

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'cairn-passes-'));
  store = new TaskStore(dir);
  const file = join(dir, 'rows.npy');
  writeFileSync(file, npyOf({ matrix: matrix(), rows: ROWS, cols: COLS }));
  await ingestFile(file, { storeDir: store.storeDir(tenant), datasetId, options: defaultReadOptions({}) });
  await store.create(parent, { kind: 'job', datasetId, options: { k: 4 }, createdAt: new Date().toISOString() });
  backend = await createBackend('onnx', { threads: 1 });
}, 60_000);

afterAll(async () => {
  await backend?.dispose();
  rmSync(dir, { recursive: true, force: true });
});

/** The dataset's rows in a space, as a selection prepares them (in memory). */
async function space(text: string): Promise<PreparedSpace> {
  return prepareSpace(openDataset(store.storeDir(tenant), datasetId).rowSource(), parseSpace(text), backend, new Rng(3));
}

type Workers = 'others take shards' | 'nobody else' | 'a claimant died';

/** Sharded passes over 2-block shards; `workers` says who else computes shards. */
function sharded(prepared: PreparedSpace, workers: Workers, records: PassRecord[], pending: Promise<void>[]): RowPasses {
  return shardedPasses({
    store,
    parent,
    source: { kind: 'dataset', datasetId },
    recipe: prepared.recipe,
    shardRows: 2 * PASS_BLOCK_ROWS,
    signal: new AbortController().signal,
    onPass: (r) => records.push(r),
    claimStaleMs: 500,
    spawn: async (refs) => {
      if (workers === 'nobody else') return;
      if (workers === 'a claimant died') {
        // Shard 1 was claimed by a worker that died: its claim never changes, so after claimStaleMs the job computes it itself.
        const spec = await store.readSpec<PassSpec>(refs[1]);
        const claim = join(store.dir(parent), 'passes', spec.pass, '1.claim');
        writeFileSync(claim, JSON.stringify({ host: 'gone', pid: 1 }));
        // Stamped an hour ahead, as by a host whose clock runs fast: only a change of the stamp counts as life.
        const ahead = new Date(Date.now() + 3_600_000);
        utimesSync(claim, ahead, ahead);
        return;
      }
      // Other workers, here in this process: each shard task runs as a worker would run it.
      for (const ref of refs) {
        pending.push(passProcessor({ store, ref, signal: new AbortController().signal, onProgress: () => undefined, computeThreads: 1, checkpointEveryMs: 1000, modelsDir: '', passShardRows: 0 }));
      }
    },
  });
}

describe.each(['raw', 'standardize', 'pca:3'])('full passes in the %s space', (spaceText) => {
  const kernel: KernelSpec = { kind: 'energy', a: 0.5 };
  const k = 7;

  it.each<Workers>(['others take shards', 'nobody else', 'a claimant died'])('sharded equals local when %s', async (workers) => {
    const prepared = await space(spaceText);
    const rows = prepared.rows;
    const points = rows.gather([0, 5, 999, 20_000, 40_001, 70_000, ROWS - 1]);
    const records: PassRecord[] = [];
    const pending: Promise<void>[] = [];
    const passes = sharded(prepared, workers, records, pending);

    const near = await localPasses.nearest(rows, backend, points, k, 12);
    const nearSharded = await passes.nearest(rows, backend, points, k, 12);
    expect(nearSharded.m).toBe(12);
    expect(Array.from(nearSharded.index)).toEqual(Array.from(near.index));
    expect(Array.from(nearSharded.sqDist)).toEqual(Array.from(near.sqDist));

    const assign = await localPasses.assign(rows, backend, kernel, points, k);
    const assignSharded = await passes.assign(rows, backend, kernel, points, k);
    expect(Buffer.from(assignSharded.assignment.buffer).equals(Buffer.from(assign.assignment.buffer))).toBe(true);
    expect(Buffer.from(assignSharded.distance.buffer).equals(Buffer.from(assign.distance.buffer))).toBe(true);
    expect(Array.from(assignSharded.hSum)).toEqual(Array.from(assign.hSum));
    await Promise.all(pending);

    // Both passes went through shards: 3 of them (2 + 2 + 1 partial blocks), each recorded.
    expect(records.map((r) => r.op)).toEqual(['nearest', 'assign']);
    for (const r of records) expect(r.shards.map((s) => [s.start, s.count])).toEqual(passRanges(ROWS, 2 * PASS_BLOCK_ROWS));
    if (workers === 'a claimant died') for (const r of records) expect(r.shards[1].pid).toBe(process.pid);
    // Nothing is left behind: no pass folder, no shard task.
    expect(await store.list(tenant, 'pass')).toEqual([]);
    expect(readdirSync(join(store.dir(parent), 'passes'))).toEqual([]);
  }, 60_000);
});

describe('a selection with sharded passes', () => {
  it('returns the result of one with local passes', async () => {
    const options = { k: 6, seed: 2, maxIterations: 300, space: 'standardize' };
    const run = async (passes?: 'sharded') => {
      let assignments: { rank: Int32Array; distance: Float32Array } | null = null;
      const records: PassRecord[] = [];
      const pending: Promise<void>[] = [];
      const source = openDataset(store.storeDir(tenant), datasetId).rowSource();
      const result = await select(source, options, {
        backend,
        sourceIsScratch: true,
        passes: passes ? (recipe) => sharded({ recipe } as PreparedSpace, 'others take shards', records, pending) : undefined,
        onAssignments: (rank, distance) => {
          assignments = { rank, distance };
        },
      });
      await Promise.all(pending);
      return { result, assignments: assignments!, records };
    };
    const local = await run();
    const shared = await run('sharded');
    expect(shared.records.map((r) => r.op)).toEqual(['nearest', 'assign']);
    expect(local.records).toEqual([]);
    const { seconds: _a, ...localTrace } = local.result.trace;
    const { seconds: _b, ...sharedTrace } = shared.result.trace;
    expect({ ...shared.result, trace: sharedTrace }).toEqual({ ...local.result, trace: localTrace });
    expect(Array.from(shared.assignments.rank)).toEqual(Array.from(local.assignments.rank));
    expect(Array.from(shared.assignments.distance)).toEqual(Array.from(local.assignments.distance));
  }, 120_000);

});

import { randomBytes } from 'node:crypto';
import { hostname } from 'node:os';
import { mkdir, open, readFile, rm, stat, utimes, writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { threadId } from 'node:worker_threads';
import { createBackend } from '../compute/create-backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import {
  assignInRange,
  localPasses,
  mergeAssignParts,
  mergeCandidates,
  nearestInRange,
  PASS_BLOCK_ROWS,
  passRanges,
  type AssignPart,
  type AssignPass,
  type CandidateLists,
  type RowPasses,
} from '../core/row-passes.js';
import type { RowSource } from '../core/rows.js';
import { spaceBlockReader, type SpaceRecipe } from '../core/space.js';
import { openDataset } from '../data/dataset-store.js';
import { closeRows, openRows } from '../data/file-rows.js';
import { pathExists, writeFileAtomic } from '../data/file-ops.js';
import { CairnError } from '../errors.js';
import { EmbeddingCache } from './embedding-cache.js';
import type { ProcessorContext } from './processor.js';
import type { TaskStore } from './task-store.js';
import type { PassSpec, TaskRef } from './task.js';

/**
 * Full passes of one selection shared by many workers. The running selection (the parent) writes
 * the pass — its points, kernel and how to rebuild the selection space from the stored rows — to
 * `passes/<id>/` in its job folder, hands one task per row range (a shard, whole blocks of
 * PASS_BLOCK_ROWS) to the queue, and then works through the shards itself too, first to last;
 * a shard task takes its own shard and then any still free, last to first. Whoever creates a
 * shard's claim file first (exclusive create) computes it and writes its part atomically; the
 * parent merges the parts in row order (exact: see src/core/row-passes.ts) once all are there.
 *
 * The parent never waits on a queue slot: with one worker, or workers busy elsewhere, it computes
 * every shard itself and the shard tasks find nothing left when they start. A claimant that dies
 * stops touching its claim; after CLAIM_STALE_MS the parent computes that shard itself. Claims,
 * parts and the shard tasks are deleted when the pass ends.
 *
 * Why claims rather than a BullMQ flow: a flow parent waits in the queue until its children end,
 * which either blocks a running selection on a free worker slot (deadlock with one worker) or
 * restarts it from its checkpoint after every pass; claims need neither, and work the same in the
 * embedded queue.
 */

/** How often a claimant touches its claim file while it computes the shard. */
const HEARTBEAT_MS = 2000;
/** A claim untouched for this long (as the job's process sees it) belongs to a dead claimant. */
const CLAIM_STALE_MS = 20_000;
/** How often the parent looks for the parts of shards others compute. */
const WAIT_POLL_MS = 50;

/** Where a pass's workers find the job's rows in the source space. */
export type PassSource = { kind: 'dataset'; datasetId: string } | { kind: 'embedding'; datasetId: string; cacheKey: string };

/** pass.json: everything a worker needs besides the points (points.f32). */
interface PassFile {
  op: 'nearest' | 'assign';
  rows: number;
  sourceCols: number;
  /** Selection-space columns. */
  cols: number;
  k: number;
  /** nearest: candidates per point. */
  m: number;
  kernel: KernelSpec | null;
  source: PassSource;
  recipe: { shift: number[]; scale: number[] | null; axes: number[] | null; cols: number };
  shards: Array<{ start: number; count: number }>;
}

interface Claimant {
  host: string;
  pid: number;
  thread: number;
}

/** Who computed each shard of a pass (kept in the job's passes.json, for operators and tests). */
export interface PassRecord {
  op: PassFile['op'];
  rows: number;
  /** Host, process and thread (worker_threads id; 0 for a process's main thread) that computed each shard. */
  shards: Array<{ start: number; count: number } & Claimant>;
}

export interface ShardedPassesOptions {
  store: TaskStore;
  /** The selection job. */
  parent: TaskRef;
  source: PassSource;
  recipe: SpaceRecipe;
  /** Rows per shard (rounded down to whole blocks). */
  shardRows: number;
  /** Hands the shard tasks to the queue. */
  spawn: (refs: TaskRef[]) => Promise<void>;
  /** Takes the pass's shard tasks that have not started out of the queue, when the pass ends. */
  withdraw?: (refs: TaskRef[]) => Promise<void>;
  signal: AbortSignal;
  /** Every pass's record, when it ends. */
  onPass?: (record: PassRecord) => void;
  /** A claim untouched this long is a dead claimant's. Default CLAIM_STALE_MS. */
  claimStaleMs?: number;
}

/** RowPasses that share every pass of at least two shards with other workers; smaller ones run here. */
export function shardedPasses(o: ShardedPassesOptions): RowPasses {
  const local: Claimant = { host: hostname(), pid: process.pid, thread: threadId };
  const run = async <T>(
    rows: RowSource,
    file: Omit<PassFile, 'rows' | 'cols' | 'sourceCols' | 'source' | 'recipe' | 'shards'>,
    points: Float32Array,
    compute: (start: number, count: number) => Promise<Uint8Array>,
    merge: (parts: Buffer[], shards: Array<[number, number]>) => T,
  ): Promise<T> => {
    const ranges = passRanges(rows.rows, o.shardRows);
    const passId = randomBytes(6).toString('hex');
    const dir = join(o.store.dir(o.parent), 'passes', passId);
    const pass: PassFile = {
      ...file,
      rows: rows.rows,
      cols: rows.cols,
      sourceCols: o.recipe.shift.length,
      source: o.source,
      recipe: { shift: Array.from(o.recipe.shift), scale: o.recipe.scale ? Array.from(o.recipe.scale) : null, axes: o.recipe.axes ? Array.from(o.recipe.axes) : null, cols: o.recipe.cols },
      shards: ranges.map(([start, count]) => ({ start, count })),
    };
    const refs: TaskRef[] = ranges.map((_, i) => ({ kind: 'pass', tenant: o.parent.tenant, id: `${o.parent.id}-${passId}-${i}` }));
    await mkdir(dir, { recursive: true });
    try {
      await writeFile(join(dir, 'points.f32'), new Uint8Array(points.buffer, points.byteOffset, points.byteLength));
      await writeFile(join(dir, 'pass.json'), JSON.stringify(pass));
      const createdAt = new Date().toISOString();
      for (const [i, ref] of refs.entries()) {
        await o.store.create(ref, { kind: 'pass', parentJobId: o.parent.id, pass: passId, shard: i, start: ranges[i][0], count: ranges[i][1], createdAt } satisfies PassSpec);
      }
      // Other workers may take shards from here on; a queue that cannot take them leaves them all to this loop.
      await o.spawn(refs).catch(() => undefined);
      const byWhom = new Map<number, Claimant>();
      const computeHere = async (i: number): Promise<void> => {
        await writeFileAtomic(partPath(dir, i), await compute(...ranges[i]));
        byWhom.set(i, local);
      };
      for (let i = 0; i < ranges.length; i++) {
        checkAbort(o.signal);
        if (await claim(dir, i)) await withHeartbeat(claimPath(dir, i), () => computeHere(i));
      }
      // The rest are being computed elsewhere: wait for them, taking over any whose claimant died.
      // A claim is stale when its mtime has not changed for CLAIM_STALE_MS by this process's clock
      // (another host's clock may be off: only changes of its timestamps are compared).
      const touched = new Map<number, { mtimeMs: number; seenAt: number }>();
      for (;;) {
        const missing: number[] = [];
        for (let i = 0; i < ranges.length; i++) if (!(await pathExists(partPath(dir, i)))) missing.push(i);
        if (!missing.length) break;
        checkAbort(o.signal);
        for (const i of missing) {
          const s = await stat(claimPath(dir, i)).catch(() => null);
          const last = touched.get(i);
          if (s && last?.mtimeMs !== s.mtimeMs) touched.set(i, { mtimeMs: s.mtimeMs, seenAt: Date.now() });
          else if (!s || Date.now() - last!.seenAt > (o.claimStaleMs ?? CLAIM_STALE_MS)) await computeHere(i);
        }
        await new Promise((r) => setTimeout(r, WAIT_POLL_MS));
      }
      const parts: Buffer[] = [];
      for (let i = 0; i < ranges.length; i++) {
        parts.push(await readFile(partPath(dir, i)));
        if (!byWhom.has(i)) byWhom.set(i, await claimant(dir, i));
      }
      o.onPass?.({ op: file.op, rows: rows.rows, shards: ranges.map(([start, count], i) => ({ start, count, ...byWhom.get(i)! })) });
      return merge(parts, ranges);
    } finally {
      await o.withdraw?.(refs).catch(() => undefined);
      await rm(dir, { recursive: true, force: true });
      await Promise.all(refs.map((r) => o.store.remove(r).catch(() => undefined)));
    }
  };

  return {
    async nearest(rows, backend, points, k, m) {
      if (passRanges(rows.rows, o.shardRows).length < 2) return localPasses.nearest(rows, backend, points, k, m);
      const M = Math.min(m, rows.rows);
      const read = (s: number, c: number) => rows.read(s, c);
      return run(
        rows,
        { op: 'nearest', k, m: M, kernel: null },
        points,
        async (start, count) => encodeCandidates(await nearestInRange(read, backend, points, k, rows.cols, M, start, count)),
        (parts) => mergeCandidates(parts.map((b) => decodeCandidates(b, k, M)), k, M),
      );
    },
    async assign(rows, backend, kernel, points, k) {
      if (passRanges(rows.rows, o.shardRows).length < 2) return localPasses.assign(rows, backend, kernel, points, k);
      const read = (s: number, c: number) => rows.read(s, c);
      return run<AssignPass>(
        rows,
        { op: 'assign', k, m: 0, kernel },
        points,
        async (start, count) => encodeAssignPart(await assignInRange(read, backend, kernel, points, k, rows.cols, start, count)),
        (parts, ranges) => mergeAssignParts(parts.map((b, i) => decodeAssignPart(b, ranges[i][0], ranges[i][1], k)), rows.rows, k),
      );
    },
  };
}

/**
 * The processor of a shard task: computes its shard from the stored rows through the pass's
 * recipe, unless the job or another worker has claimed it, and then any shard still unclaimed,
 * from the last one down (the job works from the first one up), so a worker that is free early
 * takes a fair share whatever order the queue hands out the tasks in. A shard task whose pass is
 * over (done, or its job gone) removes its own task folder and ends.
 */
export async function passProcessor(ctx: ProcessorContext): Promise<void> {
  const { store, ref } = ctx;
  const spec = await store.readSpec<PassSpec>(ref);
  const parent: TaskRef = { kind: 'job', tenant: ref.tenant, id: spec.parentJobId };
  const dir = join(store.dir(parent), 'passes', spec.pass);
  const text = await readFile(join(dir, 'pass.json'), 'utf8').catch(() => null);
  if (text === null || (await store.cancelRequested(parent))) {
    await store.remove(ref).catch(() => undefined);
    return;
  }
  const pass = JSON.parse(text) as PassFile;
  if (await pathExists(claimPath(dir, spec.shard))) {
    // Taken already: worth starting the compute backend only if some shard is still free.
    let free = false;
    for (let i = 0; i < pass.shards.length && !free; i++) free = !(await pathExists(claimPath(dir, i)));
    if (!free) return;
  }
  const pointsBuf = await readFile(join(dir, 'points.f32'));
  const points = new Float32Array(pointsBuf.buffer, pointsBuf.byteOffset, pointsBuf.byteLength / 4);
  const source = await openSource(store, ref.tenant, pass);
  try {
    const backend = await createBackend('onnx', { ...(ctx.computeThreads > 0 ? { threads: ctx.computeThreads } : {}), memoryArena: false });
    try {
      const recipe: SpaceRecipe = {
        shift: Float32Array.from(pass.recipe.shift),
        scale: pass.recipe.scale ? Float32Array.from(pass.recipe.scale) : null,
        axes: pass.recipe.axes ? Float32Array.from(pass.recipe.axes) : null,
        cols: pass.recipe.cols,
      };
      const read = spaceBlockReader(source, recipe, backend);
      const order = [spec.shard, ...pass.shards.map((_, i) => pass.shards.length - 1 - i).filter((i) => i !== spec.shard)];
      let done = 0;
      for (const i of order) {
        if (ctx.signal.aborted || !(await pathExists(dir))) break;
        if (!(await claim(dir, i))) continue;
        const { start, count } = pass.shards[i];
        const part = await withHeartbeat(claimPath(dir, i), () =>
          pass.op === 'nearest'
            ? nearestInRange(read, backend, points, pass.k, pass.cols, pass.m, start, count).then(encodeCandidates)
            : assignInRange(read, backend, pass.kernel!, points, pass.k, pass.cols, start, count).then(encodeAssignPart),
        );
        // The pass may have ended meanwhile (the job took the shard over): then there is nowhere to write.
        if (await pathExists(dir)) await writeFileAtomic(partPath(dir, i), part).catch(() => undefined);
        ctx.onProgress({ phase: pass.op === 'nearest' ? 'snap' : 'coverage', fraction: ++done / pass.shards.length });
      }
    } finally {
      await backend.dispose();
    }
  } finally {
    closeRows(source);
  }
}

/** The job's rows in the source space, read from their file block by block (a shard holds one block at a time). */
async function openSource(store: TaskStore, tenant: string, pass: PassFile): Promise<RowSource> {
  if (pass.source.kind === 'dataset') return openDataset(store.storeDir(tenant), pass.source.datasetId).rowSource(0);
  const cache = new EmbeddingCache(join(store.embeddingsDir(tenant, pass.source.datasetId), pass.source.cacheKey));
  return openRows(cache.matrixPath, pass.rows, pass.sourceCols, 0);
}

function partPath(dir: string, shard: number): string {
  return join(dir, `${shard}.part`);
}

function claimPath(dir: string, shard: number): string {
  return join(dir, `${shard}.claim`);
}

/** Creates the shard's claim file; false when someone else did first (or the pass is over). */
async function claim(dir: string, shard: number): Promise<boolean> {
  try {
    const fh = await open(claimPath(dir, shard), 'wx');
    await fh.writeFile(JSON.stringify({ host: hostname(), pid: process.pid, thread: threadId } satisfies Claimant));
    await fh.close();
    return true;
  } catch (err) {
    const code = (err as NodeJS.ErrnoException).code;
    if (code === 'EEXIST' || code === 'ENOENT') return false;
    throw err;
  }
}

async function claimant(dir: string, shard: number): Promise<Claimant> {
  try {
    const c = JSON.parse(await readFile(claimPath(dir, shard), 'utf8')) as Claimant;
    return { host: String(c.host), pid: Number(c.pid), thread: Number(c.thread) };
  } catch {
    return { host: 'unknown', pid: 0, thread: 0 };
  }
}

/** Runs `work`, touching the claim file meanwhile so that the parent knows its claimant lives. */
async function withHeartbeat<T>(path: string, work: () => Promise<T>): Promise<T> {
  const timer = setInterval(() => {
    const now = new Date();
    void utimes(path, now, now).catch(() => undefined);
  }, HEARTBEAT_MS);
  try {
    return await work();
  } finally {
    clearInterval(timer);
  }
}

function checkAbort(signal: AbortSignal): void {
  if (signal.aborted) throw new CairnError('SELECTION_CANCELLED');
}

// Parts on disk: the arrays one after the other, in the machine's byte order (little-endian on
// every platform Node runs on); the reader knows the shapes from pass.json.

function encodeCandidates(c: CandidateLists): Uint8Array {
  return concatBytes([c.index, c.sqDist]);
}

function decodeCandidates(b: Buffer, k: number, M: number): CandidateLists {
  const bytes = copyAligned(b);
  return { index: new Int32Array(bytes, 0, k * M), sqDist: new Float32Array(bytes, k * M * 4, k * M), m: M };
}

function encodeAssignPart(p: AssignPart): Uint8Array {
  return concatBytes([p.assignment, p.distance, p.blockSums]);
}

function decodeAssignPart(b: Buffer, start: number, count: number, k: number): AssignPart {
  const bytes = copyAligned(b);
  const sums = Math.ceil(count / PASS_BLOCK_ROWS) * k;
  if (bytes.byteLength !== count * 8 + sums * 8) throw new Error(`a pass part of ${count} rows holds ${bytes.byteLength} bytes`);
  return { start, count, assignment: new Int32Array(bytes, 0, count), distance: new Float32Array(bytes, count * 4, count), blockSums: new Float64Array(bytes, count * 8, sums) };
}

function concatBytes(arrays: Array<Int32Array | Float32Array | Float64Array>): Uint8Array {
  const out = new Uint8Array(arrays.reduce((s, a) => s + a.byteLength, 0));
  let at = 0;
  for (const a of arrays) {
    out.set(new Uint8Array(a.buffer, a.byteOffset, a.byteLength), at);
    at += a.byteLength;
  }
  return out;
}

/** The bytes in a fresh ArrayBuffer (typed views need aligned offsets; a Buffer from the pool may not be). */
function copyAligned(b: Buffer): ArrayBuffer {
  const out = new ArrayBuffer(b.byteLength);
  new Uint8Array(out).set(b);
  return out;
}

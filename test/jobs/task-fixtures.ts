import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { Rng } from '../../src/core/random.js';
import type { JobQueue, QueueEvent } from '../../src/jobs/queue.js';
import type { TaskStore } from '../../src/jobs/task-store.js';
import { isFinal, type IngestSpec, type SelectSpec, type TaskRef, type TaskState } from '../../src/jobs/task.js';
import { npyBytes } from '../data/fixtures.js';

/** Four clusters in 5-D. */
export function clusterMatrix(rows: number, seed: number): { matrix: Float32Array; rows: number; cols: number } {
  const cols = 5;
  const rng = new Rng(seed);
  const matrix = new Float32Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let t = 0; t < cols; t++) matrix[i * cols + t] = (t === i % 4 ? 5 : 0) + rng.normal();
  return { matrix, rows, cols };
}

/** Eight clusters in `cols` dimensions (cols ≥ 8). */
export function clusters(rows: number, cols: number, seed: number): { matrix: Float32Array; rows: number; cols: number } {
  const rng = new Rng(seed);
  const matrix = new Float32Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let t = 0; t < cols; t++) matrix[i * cols + t] = (t % 8 === i % 8 ? 4 : 0) + rng.normal();
  return { matrix, rows, cols };
}

let counter = 0;

/** Writes an upload into the store's uploads folder and creates the ingestion task for it. */
export async function createIngest(store: TaskStore, tenant: string, bytes: Buffer, sourceName = 'points.npy'): Promise<TaskRef> {
  const ref: TaskRef = { kind: 'dataset', tenant, id: `ds-${process.pid}-${++counter}` };
  const { mkdirSync } = await import('node:fs');
  mkdirSync(store.uploadsDir(), { recursive: true });
  const upload = join(store.uploadsDir(), `${ref.id}.upload`);
  writeFileSync(upload, bytes);
  const spec: IngestSpec = { kind: 'dataset', sourceName, sourceBytes: bytes.length, read: {}, createdAt: new Date().toISOString() };
  await store.create(ref, spec, { source: upload });
  return ref;
}

export function npyOf(m: { matrix: Float32Array; rows: number; cols: number }): Buffer {
  return Buffer.from(npyBytes(m.matrix, [m.rows, m.cols]));
}

export async function createSelect(store: TaskStore, tenant: string, datasetId: string, options: SelectSpec['options']): Promise<TaskRef> {
  const ref: TaskRef = { kind: 'job', tenant, id: `job-${process.pid}-${++counter}` };
  await store.create(ref, { kind: 'job', datasetId, options, createdAt: new Date().toISOString() });
  return ref;
}

/** Resolves with the task's state once `until` holds for a state the queue reports (or on disk), or rejects after `timeoutMs`. */
export function waitFor(store: TaskStore, queue: JobQueue, ref: TaskRef, until: (s: TaskState) => boolean = (s) => isFinal(s.status), timeoutMs = 60_000): Promise<TaskState> {
  return new Promise((resolve, reject) => {
    let done = false;
    const finish = (s: TaskState) => {
      if (done) return;
      done = true;
      clearInterval(poll);
      clearTimeout(timer);
      unsubscribe();
      resolve(s);
    };
    const same = (e: QueueEvent) => e.ref.kind === ref.kind && e.ref.tenant === ref.tenant && e.ref.id === ref.id;
    const unsubscribe = queue.subscribe((e) => {
      if (same(e) && until(e.state)) finish(e.state);
    });
    // Events are the fast path; the file is the truth (an event may come before we subscribed).
    const poll = setInterval(() => {
      void store.readState(ref).then((s) => until(s) && finish(s), () => undefined);
    }, 100);
    const timer = setTimeout(() => {
      if (done) return;
      done = true;
      clearInterval(poll);
      unsubscribe();
      void store.readState(ref).then(
        (s) => reject(new Error(`timed out waiting for ${ref.kind} ${ref.id}; last state ${JSON.stringify(s)}`)),
        () => reject(new Error(`timed out waiting for ${ref.kind} ${ref.id}`)),
      );
    }, timeoutMs);
  });
}

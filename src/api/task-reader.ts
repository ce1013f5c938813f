import { existsSync } from 'node:fs';
import { readFile } from 'node:fs/promises';
import { join } from 'node:path';
import type { StoredDatasetMeta } from '../data/stored-dataset.js';
import type { JobQueue } from '../jobs/queue.js';
import type { TaskFile, TaskStore } from '../jobs/task-store.js';
import { taskKey, type TaskRef, type TaskSpec, type TaskState } from '../jobs/task.js';

/** A state read serves every poll of the same task for this long (runners write it ≤ 4 times a second). */
const STATE_TTL_MS = 250;
/** Bound on cached specs and dataset descriptions (a few hundred bytes each). */
const MAX_ENTRIES = 50_000;

/**
 * The API's reads of task files, made cheap for dashboards that poll: spec.json and a completed
 * dataset's meta.json never change once written, so they are read once; concurrent polls of one
 * task share a single read of state.json, which is reused for STATE_TTL_MS and replaced at once
 * by every state the queue reports. Measured with scripts/bench/status-poll.mjs: each poll used
 * to cost a stat and two file reads (open, fstat, read, close) on the thread pool.
 */
export class TaskReader {
  private readonly specs = new Map<string, TaskSpec>();
  private readonly states = new Map<string, { at: number; state: Promise<TaskState> }>();
  private readonly metas = new Map<string, { meta: StoredDatasetMeta; hasImages: boolean }>();
  private readonly summaries = new Map<string, string>();

  constructor(
    readonly store: TaskStore,
    queue?: JobQueue,
  ) {
    queue?.subscribe(({ ref, state }) => {
      const key = taskKey(ref);
      if (this.states.has(key) || this.specs.has(key)) this.states.set(key, { at: Date.now(), state: Promise.resolve(state) });
    });
  }

  async readSpec<S extends TaskSpec = TaskSpec>(ref: TaskRef): Promise<S> {
    const key = taskKey(ref);
    const cached = this.specs.get(key);
    if (cached) return cached as S;
    const spec = await this.store.readSpec<S>(ref);
    remember(this.specs, key, spec);
    return spec;
  }

  readState(ref: TaskRef): Promise<TaskState> {
    const key = taskKey(ref);
    const now = Date.now();
    const cached = this.states.get(key);
    if (cached && now - cached.at < STATE_TTL_MS) return cached.state;
    const state = this.store.readState(ref);
    remember(this.states, key, { at: now, state });
    // A failed read (a deleted task) is not reused.
    state.catch(() => this.states.get(key)?.state === state && this.states.delete(key));
    return state;
  }

  /** summary.json and other files written once by a finished task. */
  async readFinalFile(ref: TaskRef, name: TaskFile): Promise<string | null> {
    const key = `${taskKey(ref)}/${name}`;
    const cached = this.summaries.get(key);
    if (cached !== undefined) return cached;
    const text = await this.store.readOptional(ref, name);
    if (text !== null) remember(this.summaries, key, text);
    return text;
  }

  /** A stored dataset's description and whether it has thumbnails; null until its ingestion completed. */
  async datasetMeta(tenant: string, datasetId: string, state: TaskState): Promise<{ meta: StoredDatasetMeta; hasImages: boolean } | null> {
    const key = `${tenant}:${datasetId}`;
    const cached = this.metas.get(key);
    if (cached) return cached;
    if (state.status !== 'completed') return null;
    const dir = join(this.store.storeDir(tenant), datasetId);
    try {
      const meta = JSON.parse(await readFile(join(dir, 'meta.json'), 'utf8')) as StoredDatasetMeta;
      const entry = { meta, hasImages: existsSync(join(dir, 'thumbs')) };
      remember(this.metas, key, entry);
      return entry;
    } catch {
      return null;
    }
  }

  /** Drops what is cached of a task (it was deleted). */
  forget(ref: TaskRef): void {
    const key = taskKey(ref);
    this.specs.delete(key);
    this.states.delete(key);
    if (ref.kind === 'dataset') this.metas.delete(`${ref.tenant}:${ref.id}`);
    for (const k of this.summaries.keys()) if (k.startsWith(`${key}/`)) this.summaries.delete(k);
  }
}

/** Map insertion with a crude bound: the oldest entry goes first. */
function remember<V>(map: Map<string, V>, key: string, value: V): void {
  map.delete(key);
  map.set(key, value);
  if (map.size > MAX_ENTRIES) map.delete(map.keys().next().value!);
}


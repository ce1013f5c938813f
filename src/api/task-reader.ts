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
/** Bound on cached response bodies (one to a few KB each). */
const MAX_BODIES = 5_000;

/**
 * The API's reads of task files, made cheap for dashboards that poll: spec.json and a completed
 * dataset's meta.json never change once written, so they are read once; concurrent polls of one
 * task share a single read of state.json, which is reused for STATE_TTL_MS and replaced at once
 * by every state the queue reports. Measured with scripts/bench/status-poll.mjs: each poll used
 * to cost a stat and two file reads (open, fstat, read, close) on the thread pool. The JSON body of
 * a resource is kept too, keyed by the objects it was built from, so polls between two state
 * writes skip building, validating and serializing it (zod's encode was the largest part of a
 * poll's own JavaScript).
 */
export class TaskReader {
  private readonly specs = new Map<string, TaskSpec>();
  private readonly states = new Map<string, { at: number; state: Promise<TaskState> }>();
  private readonly metas = new Map<string, { meta: StoredDatasetMeta; hasImages: boolean }>();
  private readonly summaries = new Map<string, string>();
  private readonly bodies = new Map<string, { inputs: readonly unknown[]; body: Buffer }>();

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

  /**
   * The serialized body of a resource of a task, rebuilt only when one of `inputs` changed: they
   * are compared by identity, so they must be the cached objects (spec, state, file text) the body
   * is built from; a state read again or reported by the queue is a new object.
   */
  body(ref: TaskRef, inputs: readonly unknown[], build: () => string): Buffer {
    const key = taskKey(ref);
    const cached = this.bodies.get(key);
    if (cached && cached.inputs.length === inputs.length && cached.inputs.every((v, i) => v === inputs[i])) return cached.body;
    const body = Buffer.from(build());
    remember(this.bodies, key, { inputs, body }, MAX_BODIES);
    return body;
  }

  /** Drops what is cached of a task (it was deleted). */
  forget(ref: TaskRef): void {
    const key = taskKey(ref);
    this.specs.delete(key);
    this.states.delete(key);
    this.bodies.delete(key);
    if (ref.kind === 'dataset') this.metas.delete(`${ref.tenant}:${ref.id}`);
    for (const k of this.summaries.keys()) if (k.startsWith(`${key}/`)) this.summaries.delete(k);
  }
}

/** Map insertion with a crude bound: the oldest entry goes first. */
function remember<V>(map: Map<string, V>, key: string, value: V, max = MAX_ENTRIES): void {
  map.delete(key);
  map.set(key, value);
  if (map.size > max) map.delete(map.keys().next().value!);
}


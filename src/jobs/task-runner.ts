import { hostname } from 'node:os';
import type { Logger } from 'pino';
import { CairnError } from '../errors.js';
import { ingestProcessor } from './ingest-processor.js';
import type { Processor } from './processor.js';
import { selectProcessor } from './select-processor.js';
import { embedProcessor } from './embed-processor.js';
import { passProcessor } from './pass-shards.js';
import type { TaskStore } from './task-store.js';
import { cancelledCode, isFinal, type TaskError, type TaskKind, type TaskProgress, type TaskRef, type TaskState } from './task.js';

const PROCESSORS: Record<TaskKind, Processor> = { dataset: ingestProcessor, job: selectProcessor, embed: embedProcessor, pass: passProcessor };

export const DEFAULT_MODELS_DIR = './models';

/** The phase a completed task of each kind reports. */
const FINAL_PHASE: Record<TaskKind, TaskProgress['phase']> = { dataset: 'ingest', job: 'done', embed: 'embed', pass: 'done' };

export interface AttemptOptions {
  store: TaskStore;
  ref: TaskRef;
  /** 1-based. A worker that resumes a stalled attempt passes the same number again. */
  attempt: number;
  maxAttempts: number;
  /** Aborted when the runner's process is shutting down: the task is left queued, to resume. */
  shutdown?: AbortSignal;
  computeThreads: number;
  checkpointEveryMs: number;
  /** Bytes a selection may hold in copies of its rows (SelectContext.memoryBudgetBytes); unset: no limit. */
  memoryBudgetBytes?: number;
  /** Default ./models. */
  modelsDir?: string;
  /** See ProcessorContext.passShardRows. Default 0 (no shards). */
  passShardRows?: number;
  /** See ProcessorContext.spawn and withdraw. */
  spawn?: (refs: TaskRef[]) => Promise<void>;
  withdraw?: (refs: TaskRef[]) => Promise<void>;
  /** Every progress update (after it has been written to state.json, at most ~4 a second). */
  onState?: (state: TaskState) => void;
  log?: Logger;
}

/**
 * - completed / failed / cancelled: final, written to state.json;
 * - retry: a transient failure with attempts left (state.json says queued, with the error);
 * - interrupted: stopped by a shutdown; state.json says queued, and a later attempt resumes;
 * - gone: the task was deleted while it ran.
 */
export type AttemptOutcome = 'completed' | 'failed' | 'cancelled' | 'retry' | 'interrupted' | 'gone';

/** How often a running task looks for the API's cancel marker. */
const CANCEL_POLL_MS = 300;
const STATE_WRITE_MS = 250;

/**
 * Runs one attempt of a task with the processor of its kind and records what happened in its
 * state.json. Bad data (a CairnError with a 4xx status) fails at once; anything else is transient
 * and is retried while attempts remain. Never throws.
 */
export async function runAttempt(o: AttemptOptions): Promise<{ outcome: AttemptOutcome; error: TaskError | null }> {
  const { store, ref } = o;
  let state: TaskState;
  try {
    state = await store.readState(ref);
  } catch {
    return { outcome: 'gone', error: null };
  }
  if (isFinal(state.status)) return { outcome: state.status as AttemptOutcome, error: state.error };

  const stop = new AbortController();
  let cancelled = false;
  const onShutdown = () => stop.abort();
  o.shutdown?.addEventListener('abort', onShutdown);
  if (o.shutdown?.aborted) stop.abort();
  const poll = setInterval(() => {
    void store.cancelRequested(ref).then((yes) => {
      if (yes && !stop.signal.aborted) {
        cancelled = true;
        stop.abort();
      }
    });
  }, CANCEL_POLL_MS);

  const now = () => new Date().toISOString();
  let lastWrite = 0;
  let writing: Promise<void> = Promise.resolve();
  const write = (next: TaskState): Promise<void> => {
    state = next;
    writing = writing.then(() => store.writeState(ref, next)).catch(() => undefined);
    return writing;
  };
  const onProgress = (p: TaskProgress): void => {
    const t = Date.now();
    if (t - lastWrite < STATE_WRITE_MS && p.fraction < 1) return;
    lastWrite = t;
    // Report the state that was written, not `state` as it is when the write ends (a later update
    // may be newer than the file then; readers that mix events and file reads would go backwards).
    const next: TaskState = { ...state, progress: p, updatedAt: now() };
    void write(next).then(() => o.onState?.(next));
  };

  try {
    if (await store.cancelRequested(ref)) {
      cancelled = true;
      throw new CairnError(cancelledCode(ref.kind));
    }
    await write({ ...state, status: 'running', attempt: o.attempt, startedAt: state.startedAt ?? now(), updatedAt: now(), runner: { host: hostname(), pid: process.pid } });
    o.onState?.(state);
    o.log?.info({ task: ref, attempt: o.attempt }, 'task started');
    await PROCESSORS[ref.kind]({ store, ref, signal: stop.signal, onProgress, computeThreads: o.computeThreads, checkpointEveryMs: o.checkpointEveryMs, memoryBudgetBytes: o.memoryBudgetBytes, modelsDir: o.modelsDir ?? DEFAULT_MODELS_DIR, passShardRows: o.passShardRows ?? 0, spawn: o.spawn, withdraw: o.withdraw });
    await writing;
    await write({ ...state, status: 'completed', progress: { ...state.progress, phase: FINAL_PHASE[ref.kind], fraction: 1 }, error: null, finishedAt: now(), updatedAt: now() });
    o.log?.info({ task: ref, attempt: o.attempt }, 'task completed');
    o.onState?.(state);
    return { outcome: 'completed', error: null };
  } catch (err) {
    await writing;
    if (!(await store.exists(ref))) return { outcome: 'gone', error: null };
    if (cancelled || (await store.cancelRequested(ref))) {
      const error = errorOf(new CairnError(cancelledCode(ref.kind)));
      await write({ ...state, status: 'cancelled', error, finishedAt: now(), updatedAt: now() });
      o.log?.info({ task: ref }, 'task cancelled');
      o.onState?.(state);
      return { outcome: 'cancelled', error };
    }
    if (stop.signal.aborted) {
      await write({ ...state, status: 'queued', updatedAt: now() });
      o.log?.info({ task: ref }, 'task interrupted by shutdown; it will resume');
      return { outcome: 'interrupted', error: null };
    }
    const error = errorOf(err);
    const permanent = err instanceof CairnError && err.status < 500;
    if (!permanent) o.log?.error({ task: ref, attempt: o.attempt, err }, 'task attempt failed');
    else o.log?.info({ task: ref, code: error.code }, 'task failed: bad input');
    if (!permanent && o.attempt < o.maxAttempts) {
      await write({ ...state, status: 'queued', error, updatedAt: now() });
      o.onState?.(state);
      return { outcome: 'retry', error };
    }
    await write({ ...state, status: 'failed', error, finishedAt: now(), updatedAt: now() });
    o.onState?.(state);
    return { outcome: 'failed', error };
  } finally {
    clearInterval(poll);
    o.shutdown?.removeEventListener('abort', onShutdown);
  }
}

/** The error as stored and shown: catalogued errors as they are; anything else only as INTERNAL_ERROR (its text may hold paths or data). */
export function errorOf(err: unknown): TaskError {
  if (err instanceof CairnError) return { code: err.code, message: err.message, details: err.details };
  const internal = new CairnError('INTERNAL_ERROR');
  return { code: internal.code, message: internal.message, details: {} };
}

import { EventEmitter } from 'node:events';
import { pathToFileURL } from 'node:url';
import { Worker } from 'node:worker_threads';
import type { Logger } from 'pino';
import { cancelUnstarted } from './cancel-unstarted.js';
import { entryFile } from './entry-file.js';
import type { JobQueue, QueueCounts, QueueEvent } from './queue.js';
import { errorOf } from './task-runner.js';
import type { TaskStore } from './task-store.js';
import { isFinal, TASK_KINDS, taskKey, type TaskRef } from './task.js';
import type { TaskThreadData, TaskThreadMessage } from './task-thread.js';

export interface EmbeddedQueueOptions {
  store: TaskStore;
  /** Tasks run at once (one worker thread each). */
  concurrency: number;
  maxAttempts: number;
  computeThreads: number;
  checkpointEveryMs: number;
  /** Bytes a selection may hold in copies of its rows (SelectContext.memoryBudgetBytes); unset: no limit. */
  memoryBudgetBytes?: number;
  /** Folder of the embedding models. Default ./models. */
  modelsDir?: string;
  /** Rows per shard of a selection's full passes, run on the other threads (with concurrency ≥ 2); 0: no shards. */
  passShardRows?: number;
  /** First retry delay; doubles per attempt. Default 1000 ms. */
  backoffMs?: number;
  log: Logger;
}

interface Running {
  ref: TaskRef;
  worker: Worker;
  done: Promise<void>;
}

/**
 * The queue when no Redis is configured: tasks run in worker threads of this process, one thread
 * per running task, and the queue's only state is the tasks' state.json files. So `start()` after
 * a restart (or a crash) finds every task still queued or running and runs it again; a selection
 * resumes from its last checkpoint.
 */
export class EmbeddedQueue implements JobQueue {
  readonly mode = 'embedded' as const;
  private readonly waiting: TaskRef[] = [];
  private readonly running = new Map<string, Running>();
  private readonly delayed = new Map<string, NodeJS.Timeout>();
  /** Parents waiting for their children: parent key → the children not finished yet. */
  private readonly blocked = new Map<string, { ref: TaskRef; pending: Set<string> }>();
  private readonly attempts = new Map<string, number>();
  private readonly events = new EventEmitter();
  private closing = false;

  constructor(private readonly o: EmbeddedQueueOptions) {
    this.events.setMaxListeners(0);
  }

  /** Picks up every task a previous process left queued or running, oldest first. */
  async start(): Promise<void> {
    const found: Array<{ ref: TaskRef; createdAt: string; attempt: number }> = [];
    for (const tenant of await this.o.store.tenants()) {
      for (const kind of TASK_KINDS) {
        for (const id of await this.o.store.list(tenant, kind)) {
          const ref = { kind, tenant, id };
          try {
            const [state, spec] = await Promise.all([this.o.store.readState(ref), this.o.store.readSpec(ref)]);
            if (!isFinal(state.status)) found.push({ ref, createdAt: spec.createdAt, attempt: state.attempt });
          } catch {
            // A folder being deleted right now: nothing to resume.
          }
        }
      }
    }
    found.sort((a, b) => a.createdAt.localeCompare(b.createdAt));
    for (const f of found) {
      // A task found running was interrupted by the stop: the same attempt goes on.
      this.attempts.set(taskKey(f.ref), Math.max(f.attempt - 1, 0));
      this.waiting.push(f.ref);
    }
    if (found.length) this.o.log.info({ tasks: found.length }, 'resuming tasks left by the previous run');
    this.pump();
  }

  async enqueue(ref: TaskRef, children: TaskRef[] = []): Promise<void> {
    const key = taskKey(ref);
    if (this.closing || this.known(key)) return;
    const pending = new Set<string>();
    for (const child of children) {
      await this.enqueue(child);
      if (this.known(taskKey(child))) pending.add(taskKey(child));
    }
    if (pending.size) {
      this.blocked.set(key, { ref, pending });
      return;
    }
    this.waiting.push(ref);
    this.pump();
  }

  private known(key: string): boolean {
    return this.running.has(key) || this.delayed.has(key) || this.blocked.has(key) || this.waiting.some((r) => taskKey(r) === key);
  }

  /** A task has finished (any outcome): parents waiting only for it may start. */
  private release(key: string): void {
    for (const [parentKey, b] of this.blocked) {
      if (!b.pending.delete(key) || b.pending.size) continue;
      this.blocked.delete(parentKey);
      this.waiting.push(b.ref);
    }
    this.pump();
  }

  /** Drops spawned tasks that have not started (their spawner removes their folders). */
  private withdraw(refs: TaskRef[]): void {
    const keys = new Set(refs.map(taskKey));
    for (let i = this.waiting.length - 1; i >= 0; i--) if (keys.has(taskKey(this.waiting[i]))) this.waiting.splice(i, 1);
  }

  async cancel(ref: TaskRef): Promise<void> {
    const key = taskKey(ref);
    const at = this.waiting.findIndex((r) => taskKey(r) === key);
    const timer = this.delayed.get(key);
    if (timer) {
      clearTimeout(timer);
      this.delayed.delete(key);
    }
    const parked = this.blocked.get(key);
    if (parked) this.blocked.delete(key);
    if (at >= 0 || timer || parked) {
      if (at >= 0) this.waiting.splice(at, 1);
      await this.finishUnstarted(ref);
      this.release(key);
    }
    // A running task sees the cancel marker within a fraction of a second.
  }

  subscribe(listener: (e: QueueEvent) => void): () => void {
    this.events.on('state', listener);
    return () => this.events.off('state', listener);
  }

  async counts(): Promise<QueueCounts> {
    return { waiting: this.waiting.length + this.delayed.size + this.blocked.size, active: this.running.size };
  }

  async ready(): Promise<boolean> {
    return !this.closing;
  }

  async close(graceMs: number): Promise<void> {
    this.closing = true;
    this.waiting.length = 0;
    this.blocked.clear();
    for (const t of this.delayed.values()) clearTimeout(t);
    this.delayed.clear();
    const all = Promise.all([...this.running.values()].map((r) => r.done));
    const timeout = new Promise<'timeout'>((res) => setTimeout(() => res('timeout'), graceMs).unref());
    if ((await Promise.race([all.then(() => 'done' as const), timeout])) === 'timeout') {
      for (const r of this.running.values()) r.worker.postMessage('shutdown');
      // Stopping takes one descent step or one read block; after that, force it.
      const forced = new Promise<void>((res) => setTimeout(res, 10_000).unref());
      await Promise.race([all, forced]);
      await Promise.all([...this.running.values()].map((r) => r.worker.terminate()));
    }
  }

  private async finishUnstarted(ref: TaskRef): Promise<void> {
    const state = await cancelUnstarted(this.o.store, ref);
    if (state) this.events.emit('state', { ref, state });
  }

  private pump(): void {
    while (!this.closing && this.running.size < this.o.concurrency && this.waiting.length) {
      const ref = this.waiting.shift()!;
      this.launch(ref);
    }
  }

  private launch(ref: TaskRef): void {
    const key = taskKey(ref);
    const attempt = (this.attempts.get(key) ?? 0) + 1;
    this.attempts.set(key, attempt);
    const entry = entryFile(import.meta.url, 'task-thread');
    const data: TaskThreadData = {
      dataDir: this.o.store.dataDir,
      ref,
      attempt,
      maxAttempts: this.o.maxAttempts,
      computeThreads: this.o.computeThreads,
      checkpointEveryMs: this.o.checkpointEveryMs,
      memoryBudgetBytes: this.o.memoryBudgetBytes,
      modelsDir: this.o.modelsDir,
      passShardRows: this.o.passShardRows ?? 0,
      canSpawn: this.o.concurrency > 1,
      logLevel: this.o.log.level,
    };
    const worker = entry.execArgv.length
      ? // From sources: the tsx loader is registered inside the thread before the entry is imported.
        new Worker(`import('tsx/esm/api').then((m) => { m.register(); return import(${JSON.stringify(pathToFileURL(entry.path).href)}); })`, { eval: true, workerData: data })
      : new Worker(entry.path, { workerData: data });
    let outcome: string | null = null;
    const done = new Promise<void>((resolve) => {
      worker.on('message', (m: TaskThreadMessage) => {
        if (m.type === 'state') this.events.emit('state', { ref, state: m.state });
        else if (m.type === 'spawn') for (const r of m.refs) void this.enqueue(r);
        else if (m.type === 'withdraw') this.withdraw(m.refs);
        else outcome = m.outcome;
      });
      worker.on('error', (err) => this.o.log.error({ task: ref, err }, 'task thread failed'));
      worker.on('exit', () => {
        this.running.delete(key);
        void this.settle(ref, attempt, outcome).finally(() => {
          resolve();
          this.pump();
        });
      });
    });
    this.running.set(key, { ref, worker, done });
  }

  /** After a thread ends: retry with backoff, or record a thread that died without reporting. */
  private async settle(ref: TaskRef, attempt: number, outcome: string | null): Promise<void> {
    const key = taskKey(ref);
    if (outcome === null) {
      // The thread died (out of memory, a native crash) before it could record anything.
      const state = await this.o.store.readState(ref).catch(() => null);
      if (this.closing) return;
      if (!state || isFinal(state.status)) {
        this.attempts.delete(key);
        this.release(key);
        return;
      }
      const error = errorOf(new Error('task thread exited'));
      const last = attempt >= this.o.maxAttempts;
      const next = { ...state, status: last ? ('failed' as const) : ('queued' as const), error, finishedAt: last ? new Date().toISOString() : null, updatedAt: new Date().toISOString() };
      await this.o.store.writeState(ref, next).catch(() => undefined);
      this.events.emit('state', { ref, state: next });
      outcome = last ? 'failed' : 'retry';
    }
    if (outcome === 'retry' && !this.closing) {
      const delay = (this.o.backoffMs ?? 1000) * 2 ** (attempt - 1);
      this.delayed.set(
        key,
        setTimeout(() => {
          this.delayed.delete(key);
          this.waiting.push(ref);
          this.pump();
        }, delay),
      );
      return;
    }
    if (outcome !== 'interrupted') {
      this.attempts.delete(key);
      if (!this.closing) this.release(key);
    }
  }
}

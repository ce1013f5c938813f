import { readlinkSync } from 'node:fs';
import { setPriority } from 'node:os';
import { parentPort, workerData } from 'node:worker_threads';
import pino from 'pino';
import { runAttempt } from './task-runner.js';
import { TaskStore } from './task-store.js';
import type { TaskRef, TaskState } from './task.js';

/**
 * Entry of the embedded queue's worker threads: runs one attempt of one task off the API's event
 * loop and reports each state to the queue. A 'shutdown' message stops the task at its next check
 * (it stays queued and resumes from its checkpoint on the next start).
 */
export interface TaskThreadData {
  dataDir: string;
  ref: TaskRef;
  attempt: number;
  maxAttempts: number;
  computeThreads: number;
  checkpointEveryMs: number;
  memoryBudgetBytes?: number;
  modelsDir?: string;
  passShardRows: number;
  /** Whether other threads could run tasks this one spawns (the queue runs more than one at once). */
  canSpawn: boolean;
  logLevel: string;
}

export type TaskThreadMessage = { type: 'state'; state: TaskState } | { type: 'spawn'; refs: TaskRef[] } | { type: 'withdraw'; refs: TaskRef[] } | { type: 'done'; outcome: string };

const data = workerData as TaskThreadData;
lowerThreadPriority();
const port = parentPort!;
const shutdown = new AbortController();
port.on('message', (m: unknown) => {
  if (m === 'shutdown') shutdown.abort();
});
const log = pino({ level: data.logLevel, base: { thread: 'task' } });
const result = await runAttempt({
  store: new TaskStore(data.dataDir),
  ref: data.ref,
  attempt: data.attempt,
  maxAttempts: data.maxAttempts,
  shutdown: shutdown.signal,
  computeThreads: data.computeThreads,
  checkpointEveryMs: data.checkpointEveryMs,
  memoryBudgetBytes: data.memoryBudgetBytes,
  modelsDir: data.modelsDir,
  passShardRows: data.passShardRows,
  spawn: data.canSpawn ? async (refs) => port.postMessage({ type: 'spawn', refs } satisfies TaskThreadMessage) : undefined,
  withdraw: data.canSpawn ? async (refs) => port.postMessage({ type: 'withdraw', refs } satisfies TaskThreadMessage) : undefined,
  log,
  onState: (state) => port.postMessage({ type: 'state', state } satisfies TaskThreadMessage),
});
port.postMessage({ type: 'done', outcome: result.outcome } satisfies TaskThreadMessage);
port.close();

/**
 * The API's event loop shares the cores with this thread: on Linux a thread has a nice value of its
 * own, and the threads it starts (onnxruntime's) inherit it, so lowering this thread's priority
 * keeps status polls fast while a selection runs and costs the selection nothing on an idle machine.
 * Elsewhere (no /proc/thread-self) the thread keeps the default priority.
 */
function lowerThreadPriority(): void {
  try {
    const tid = Number(readlinkSync('/proc/thread-self').split('/').pop());
    if (Number.isInteger(tid) && tid > 0) setPriority(tid, 10);
  } catch {
    // Not Linux, or not permitted: run at the default priority.
  }
}

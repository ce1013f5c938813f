import type { TaskStore } from './task-store.js';
import type { TaskProgress, TaskRef } from './task.js';

/** What a processor gets for one attempt of one task. */
export interface ProcessorContext {
  store: TaskStore;
  ref: TaskRef;
  /** Aborted on cancellation or shutdown; the processor stops at its next check. */
  signal: AbortSignal;
  onProgress: (p: TaskProgress) => void;
  /** ORT intra-op threads for this task's kernels (0: every core). */
  computeThreads: number;
  checkpointEveryMs: number;
  /** Bytes a selection may hold in copies of its rows (SelectContext.memoryBudgetBytes); unset: no limit. */
  memoryBudgetBytes?: number;
  /** Folder of the embedding models (a model's .onnx and .json description). */
  modelsDir: string;
  /** Rows per shard of a selection's full passes (see pass-shards.ts); 0: no shards. */
  passShardRows: number;
  /** Hands tasks to the queue, for other workers to run (absent where no other worker would). */
  spawn?: (refs: TaskRef[]) => Promise<void>;
  /** Takes spawned tasks that have not started out of the queue (their work is done or moot). */
  withdraw?: (refs: TaskRef[]) => Promise<void>;
}

/** Runs one task to completion, writing its outputs into the task folder; throws on failure. */
export type Processor = (ctx: ProcessorContext) => Promise<void>;

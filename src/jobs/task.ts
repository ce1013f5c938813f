import type { SelectOptionsInput } from '../core/options.js';
import type { SelectPhase } from '../core/result.js';
import type { ReadOptionOverrides } from '../data/read-options.js';
import type { DatasetFormat } from '../data/reader.js';
import type { ErrorCode } from '../errors.js';

/**
 * A task is one unit of queued work: ingesting an uploaded dataset, running a selection, or a
 * shard of a selection's work (rows to embed, a range of a full pass). Each
 * lives in its own folder (see TaskStore) holding spec.json (written once, when it is created),
 * state.json (written by whoever runs it) and its outputs, so the API, the embedded queue and any
 * number of workers sharing the data folder agree on it without a database.
 */
export type TaskKind = 'dataset' | 'job' | 'embed' | 'pass';

export const TASK_KINDS: readonly TaskKind[] = ['dataset', 'job', 'embed', 'pass'];

export interface TaskRef {
  kind: TaskKind;
  tenant: string;
  id: string;
}

export interface IngestSpec {
  kind: 'dataset';
  /** The client's file name (shown back; never used as a path). */
  sourceName: string;
  sourceBytes: number;
  format?: DatasetFormat;
  read: ReadOptionOverrides;
  name?: string;
  createdAt: string;
}

/** Which embedding a selection runs on, fixed when the job is created. */
export interface EmbeddingChoice {
  model: string;
  /** SHA-256 of the model file the job was created with: a replaced file is a different embedding. */
  modelSha256: string;
  normalize: boolean;
  /** Folder name of the cached embedding (see embedding-cache.ts). */
  cacheKey: string;
  /** Row ranges embedded by the job's shard tasks (children that run before it, on any worker). */
  shards: Array<{ id: string; start: number; count: number }>;
}

/** Items that already count as representatives: ids in the job's dataset, or in another one. */
export interface FixedChoice {
  ids: string[];
  /** The dataset the ids belong to; default the job's own. */
  datasetId: string;
}

/** An earlier job to stay close to (stable re-selection). */
export interface PreviousChoice {
  jobId: string;
  strength?: number;
}

export interface SelectSpec {
  kind: 'job';
  datasetId: string;
  options: SelectOptionsInput;
  embedding?: EmbeddingChoice;
  fixed?: FixedChoice;
  previous?: PreviousChoice;
  name?: string;
  createdAt: string;
}

/** One shard of an embedding: rows start..start+count−1 of a dataset, run as a child of a selection job. */
export interface EmbedSpec {
  kind: 'embed';
  datasetId: string;
  parentJobId: string;
  embedding: Omit<EmbeddingChoice, 'shards'>;
  start: number;
  count: number;
  createdAt: string;
}

/**
 * One shard of a full pass of a running selection: rows start..start+count−1 (see
 * src/jobs/pass-shards.ts). The pass itself is in the job's folder, under passes/<pass>/.
 */
export interface PassSpec {
  kind: 'pass';
  parentJobId: string;
  pass: string;
  shard: number;
  start: number;
  count: number;
  createdAt: string;
}

export type TaskSpec = IngestSpec | SelectSpec | EmbedSpec | PassSpec;

export type TaskStatus = 'queued' | 'running' | 'completed' | 'failed' | 'cancelled';

export interface TaskProgress {
  phase: SelectPhase | 'queued' | 'ingest' | 'embed';
  /** Overall fraction done, 0..1 (approximate). */
  fraction: number;
  iteration?: number;
  maxIterations?: number;
  /** Running estimate of D² during the descent. */
  loss?: number;
  etaSeconds?: number;
}

export interface TaskError {
  code: ErrorCode;
  message: string;
  details: Record<string, unknown>;
}

export interface TaskState {
  status: TaskStatus;
  /** 1-based attempt that wrote this state (0 while never started). */
  attempt: number;
  progress: TaskProgress;
  /** The error that ended the task, or the last transient one while it waits for a retry. */
  error: TaskError | null;
  startedAt: string | null;
  finishedAt: string | null;
  updatedAt: string;
  /** Host and process id that ran (or runs) the latest attempt, for operators. */
  runner?: { host: string; pid: number };
}

/** The error code a cancelled task of this kind ends with (embedding and pass shards are parts of a selection job). */
export function cancelledCode(kind: TaskKind): 'DATASET_INGEST_CANCELLED' | 'SELECTION_CANCELLED' {
  return kind === 'dataset' ? 'DATASET_INGEST_CANCELLED' : 'SELECTION_CANCELLED';
}

export const FINAL_STATUSES: readonly TaskStatus[] = ['completed', 'failed', 'cancelled'];

export function isFinal(status: TaskStatus): boolean {
  return FINAL_STATUSES.includes(status);
}

/** A task's key in maps and queue job names: `<kind>:<tenant>:<id>` (kinds and tenants contain no ':'). */
export function taskKey(ref: TaskRef): string {
  return `${ref.kind}:${ref.tenant}:${ref.id}`;
}

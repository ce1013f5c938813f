import { z } from 'zod';
import { selectOptionsSchema } from '../core/options.js';
import { ERROR_CATALOGUE } from '../errors.js';

/**
 * The API's request and response shapes: the single source of validation, TypeScript types and the
 * OpenAPI document (openapi/openapi.json is generated from these).
 */
const errorCodes = Object.keys(ERROR_CATALOGUE) as [keyof typeof ERROR_CATALOGUE, ...(keyof typeof ERROR_CATALOGUE)[]];

export const errorBody = z
  .object({
    error: z.object({
      code: z.enum(errorCodes).describe('Stable code from the error catalogue (see the API description).'),
      message: z.string(),
      details: z.record(z.string(), z.unknown()),
    }),
  })
  .describe('Every error answer has this shape.');

export const resourceId = z.string().regex(/^[A-Za-z0-9][A-Za-z0-9._-]{0,127}$/).describe('Dataset or job id.');

export const statusEnum = z.enum(['queued', 'running', 'completed', 'failed', 'cancelled']);

export const progressSchema = z.object({
  phase: z.string().describe('queued, ingest, or a selection phase: prepare, scale, seed, descent, snap, refine, coverage, baseline, done.'),
  fraction: z.number().describe('Overall fraction done, 0..1 (approximate).'),
  iteration: z.number().optional(),
  maxIterations: z.number().optional(),
  loss: z.number().optional().describe('Running estimate of D² during the descent.'),
  etaSeconds: z.number().optional(),
});

export const modelEntry = z.object({
  name: z.string(),
  status: z.enum(['ready', 'invalid']),
  error: z.object({ code: z.string(), message: z.string() }).nullable().describe('Why the model failed validation at start-up.'),
  description: z.record(z.string(), z.unknown()).nullable().describe('The model description with defaults filled in.'),
  sha256: z.string().nullable().describe('SHA-256 of the .onnx file.'),
});

const taskError = errorBody.shape.error.nullable().describe('Why the task failed or was cancelled; while a retry waits, the transient error.');

export const datasetResource = z.object({
  id: resourceId,
  name: z.string().nullable(),
  status: statusEnum.describe('Ingestion status: the dataset can be used by jobs once completed.'),
  progress: progressSchema,
  error: taskError,
  attempt: z.number().int(),
  source: z.object({ name: z.string(), bytes: z.number().int() }),
  rows: z.number().int().nullable(),
  cols: z.number().int().nullable(),
  format: z.string().nullable(),
  hasLabels: z.boolean().nullable(),
  hasImages: z.boolean().nullable(),
  sha256: z.string().nullable().describe('SHA-256 of the uploaded file.'),
  droppedNonFinite: z.number().int().nullable(),
  skippedImages: z.number().int().nullable(),
  createdAt: z.string(),
  startedAt: z.string().nullable(),
  finishedAt: z.string().nullable(),
});

export const jobResource = z.object({
  id: resourceId,
  name: z.string().nullable(),
  datasetId: resourceId,
  status: statusEnum,
  progress: progressSchema,
  error: taskError,
  attempt: z.number().int().describe('1-based attempt running or last run (0 before the first start).'),
  options: z.record(z.string(), z.unknown()).describe('The selection options as given (defaults are applied when the job runs).'),
  createdAt: z.string(),
  startedAt: z.string().nullable(),
  finishedAt: z.string().nullable(),
  embedding: z
    .object({
      model: z.string(),
      normalize: z.boolean(),
      shards: z.array(z.object({ id: z.string(), start: z.number().int(), count: z.number().int(), status: statusEnum, fraction: z.number() })),
    })
    .nullable()
    .describe('For a job in an embedding space: the model, and the embedding shards this job queued (none when the embedding was cached) with their progress.'),
  fixed: z.object({ ids: z.array(z.string()), datasetId: z.string() }).nullable().describe('The fixed items the job was given.'),
  previous: z.object({ jobId: z.string(), strength: z.number().optional() }).nullable().describe('The earlier job of a stable re-selection.'),
  summary: z
    .object({ k: z.number().int(), d2: z.number(), ratioToRandom: z.number().nullable(), seconds: z.number() })
    .nullable()
    .describe('For a completed job: k, D², D² relative to random k-subsets, and the run time.'),
});

export const embeddingChoice = z
  .object({
    model: z.string().min(1).max(64).describe('Name of a ready model (GET /v1/models).'),
    normalize: z.boolean().optional().describe("Scale each embedded vector to unit length; default: the model description's `normalize`."),
  })
  .describe('Select in the embedding space of an ONNX model (image datasets only). The embedding is computed once per dataset and model, in shards any worker can run, and reused by later jobs; `space` then applies to the embedded vectors.');

export const fixedChoice = z
  .object({
    ids: z.array(z.string().min(1).max(512)).min(1).max(10_000).describe('Ids of items that already count as representatives (e.g. annotated earlier).'),
    datasetId: resourceId.optional().describe("The dataset the ids belong to (same columns, or images for an embedding job); default the job's own."),
  })
  .describe('Fixed items: they enter the objective with their own weights and are never moved or replaced; the job chooses k new items besides them and reports the coverage gain of the new ones.');

export const previousChoice = z
  .object({
    jobId: resourceId.describe('A completed job, usually on an earlier version of the dataset; its representatives are matched by id.'),
    strength: z.number().min(0).max(1000).optional().describe('How strongly to keep the earlier representatives: about the share of D² that keeping all of them may cost. 0 = a plain warm start; default 0.1.'),
  })
  .describe('Stable re-selection: start from an earlier job’s representatives and keep them where the data did not change. The result reports kept / replaced / added and D² against an unconstrained run (which the job also runs).');

export const createJobBody = selectOptionsSchema.extend({
  embedding: embeddingChoice.optional(),
  fixed: fixedChoice.optional(),
  previous: previousChoice.optional(),
  datasetId: resourceId.describe('A dataset of this tenant whose ingestion has completed.'),
  name: z.string().max(200).optional().describe('Free text shown back in listings.'),
});

export const listQuery = z.object({
  limit: z.coerce.number().int().min(1).max(1000).default(100).describe('At most this many, newest first. Default 100.'),
  status: statusEnum.optional(),
});

export const jobListQuery = listQuery.extend({ datasetId: resourceId.optional() });

export const idParams = z.object({ id: resourceId });

export const assignmentsQuery = z.object({
  format: z.enum(['ndjson', 'csv']).default('ndjson').describe('ndjson (default): one JSON object per item; csv: a header row and one row per item.'),
});

export const contactSheetQuery = z.object({
  limit: z.coerce.number().int().min(1).max(2000).default(100).describe('The first m representatives by rank. Default 100.'),
  columns: z.coerce.number().int().min(1).max(100).optional().describe('Default min(10, ⌈√m⌉).'),
  cellSize: z.coerce.number().int().min(16).max(512).default(128).describe('Pixels per thumbnail. Default 128.'),
});

/** Text fields of the multipart upload (besides the `file` part). */
export const uploadFields = z.object({
  name: z.string().max(200).optional(),
  format: z.enum(['npy', 'csv', 'tsv', 'jsonl', 'parquet', 'zip', 'tar']).optional(),
  idField: z.string().min(1).max(200).optional(),
  labelField: z.string().min(1).max(200).optional(),
  vectorField: z.string().min(1).max(200).optional(),
  nonFinite: z.enum(['fail', 'drop']).optional(),
  imageSize: z.coerce.number().int().min(4).max(512).optional(),
  imageColor: z.enum(['gray', 'rgb']).optional(),
});

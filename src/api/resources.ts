import { z } from 'zod';
import type { IngestSpec, SelectSpec, TaskRef, TaskState } from '../jobs/task.js';
import { datasetResource, jobResource } from './schemas.js';
import type { TaskReader } from './task-reader.js';

/** The content type fastify gives serialized JSON, for bodies sent already serialized. */
export const JSON_TYPE = 'application/json; charset=utf-8';

export type DatasetResource = z.infer<typeof datasetResource>;
export type JobResource = z.infer<typeof jobResource>;

/** The dataset as the API shows it: its ingestion task's state plus, once stored, its description. */
export async function datasetView(reader: TaskReader, ref: TaskRef): Promise<DatasetResource> {
  return datasetFrom(ref, await datasetInputs(reader, ref));
}

/** GET /v1/datasets/{id}'s JSON body, as fastify's serializer would write it; cached until the dataset's state changes. */
export async function datasetBody(reader: TaskReader, ref: TaskRef): Promise<Buffer> {
  const i = await datasetInputs(reader, ref);
  return reader.body(ref, [i.spec, i.state, i.stored], () => JSON.stringify(z.encode(datasetResource, datasetFrom(ref, i))));
}

interface DatasetInputs {
  spec: IngestSpec;
  state: TaskState;
  stored: Awaited<ReturnType<TaskReader['datasetMeta']>>;
}

async function datasetInputs(reader: TaskReader, ref: TaskRef): Promise<DatasetInputs> {
  const [spec, state] = await Promise.all([reader.readSpec<IngestSpec>(ref), reader.readState(ref)]);
  return { spec, state, stored: await reader.datasetMeta(ref.tenant, ref.id, state) };
}

function datasetFrom(ref: TaskRef, { spec, state, stored }: DatasetInputs): DatasetResource {
  const meta = stored?.meta ?? null;
  const hasImages = stored ? stored.hasImages : null;
  return {
    id: ref.id,
    name: spec.name ?? null,
    ...common(state),
    source: { name: spec.sourceName, bytes: spec.sourceBytes },
    rows: meta?.rows ?? null,
    cols: meta?.cols ?? null,
    format: meta?.format ?? spec.format ?? null,
    hasLabels: meta?.hasLabels ?? null,
    hasImages,
    sha256: meta?.sha256 ?? null,
    droppedNonFinite: meta?.droppedNonFinite ?? null,
    skippedImages: meta?.skippedImages ?? null,
    createdAt: spec.createdAt,
  };
}

export async function jobView(reader: TaskReader, ref: TaskRef): Promise<JobResource> {
  return jobFrom(ref, await jobInputs(reader, ref));
}

/**
 * GET /v1/jobs/{id}'s JSON body, as fastify's serializer would write it (zod encode, then
 * JSON.stringify); cached until the job's (or a shard's) state changes, so most polls only send it.
 */
export async function jobBody(reader: TaskReader, ref: TaskRef): Promise<Buffer> {
  const i = await jobInputs(reader, ref);
  return reader.body(ref, [i.spec, i.state, i.summary, ...i.shards], () => JSON.stringify(z.encode(jobResource, jobFrom(ref, i))));
}

interface JobInputs {
  spec: SelectSpec;
  state: TaskState;
  /** summary.json's text once completed. */
  summary: string | null;
  /** The embedding shards' states, in the spec's order (null: gone). */
  shards: (TaskState | null)[];
}

async function jobInputs(reader: TaskReader, ref: TaskRef): Promise<JobInputs> {
  const [spec, state] = await Promise.all([reader.readSpec<SelectSpec>(ref), reader.readState(ref)]);
  const summary = state.status === 'completed' ? await reader.readFinalFile(ref, 'summary.json') : null;
  const shards = spec.embedding ? await Promise.all(spec.embedding.shards.map((sh) => reader.readState({ kind: 'embed', tenant: ref.tenant, id: sh.id }).catch(() => null))) : [];
  return { spec, state, summary, shards };
}

function jobFrom(ref: TaskRef, { spec, state, summary: text, shards }: JobInputs): JobResource {
  const summary = text ? (JSON.parse(text) as JobResource['summary']) : null;
  let embedding: JobResource['embedding'] = null;
  if (spec.embedding) {
    const states = spec.embedding.shards.map((sh, i) => ({ ...sh, status: shards[i]?.status ?? ('completed' as const), fraction: shards[i]?.progress.fraction ?? 1 }));
    embedding = { model: spec.embedding.model, normalize: spec.embedding.normalize, shards: states };
  }
  return {
    id: ref.id,
    name: spec.name ?? null,
    datasetId: spec.datasetId,
    embedding,
    fixed: spec.fixed ?? null,
    previous: spec.previous ?? null,
    ...common(state),
    options: spec.options as Record<string, unknown>,
    createdAt: spec.createdAt,
    summary,
  };
}

function common(state: TaskState) {
  return {
    status: state.status,
    progress: state.progress,
    error: state.error,
    attempt: state.attempt,
    startedAt: state.startedAt,
    finishedAt: state.finishedAt,
  };
}

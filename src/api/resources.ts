import type { z } from 'zod';
import type { IngestSpec, SelectSpec, TaskRef, TaskState } from '../jobs/task.js';
import type { datasetResource, jobResource } from './schemas.js';
import type { TaskReader } from './task-reader.js';

export type DatasetResource = z.infer<typeof datasetResource>;
export type JobResource = z.infer<typeof jobResource>;

/** The dataset as the API shows it: its ingestion task's state plus, once stored, its description. */
export async function datasetView(reader: TaskReader, ref: TaskRef): Promise<DatasetResource> {
  const [spec, state] = await Promise.all([reader.readSpec<IngestSpec>(ref), reader.readState(ref)]);
  const stored = await reader.datasetMeta(ref.tenant, ref.id, state);
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
  const [spec, state] = await Promise.all([reader.readSpec<SelectSpec>(ref), reader.readState(ref)]);
  let summary: JobResource['summary'] = null;
  if (state.status === 'completed') {
    const text = await reader.readFinalFile(ref, 'summary.json');
    summary = text ? (JSON.parse(text) as JobResource['summary']) : null;
  }
  let embedding: JobResource['embedding'] = null;
  if (spec.embedding) {
    const shards = await Promise.all(
      spec.embedding.shards.map(async (sh) => {
        const s = await reader.readState({ kind: 'embed', tenant: ref.tenant, id: sh.id }).catch(() => null);
        return { ...sh, status: s?.status ?? ('completed' as const), fraction: s?.progress.fraction ?? 1 };
      }),
    );
    embedding = { model: spec.embedding.model, normalize: spec.embedding.normalize, shards };
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

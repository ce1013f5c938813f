import { join } from 'node:path';
import { embedRows } from '../embed/embedder.js';
import type { ReadyModel } from '../embed/model-registry.js';
import type { FixedItems, PreviousSelection } from '../core/given-items.js';
import type { RowSource } from '../core/rows.js';
import { openDataset, type StoredDataset } from '../data/dataset-store.js';
import { CairnError } from '../errors.js';
import type { ProcessorContext } from './processor.js';
import type { ResultDocument } from './result-document.js';
import type { FixedChoice, PreviousChoice } from './task.js';

/**
 * Vectors of items a job names (fixed items, an earlier job's representatives) in the job's
 * source space: rows of the job's own dataset come from `rows` (its matrix or its embedding);
 * items of another dataset from that dataset's matrix, or embedded with the job's model.
 */
export interface GivenSource {
  ctx: Pick<ProcessorContext, 'store' | 'ref' | 'signal' | 'computeThreads' | 'modelsDir'>;
  datasetId: string;
  /** The job's rows in its source space (before any in-place transform). */
  rows: RowSource;
  ids: string[];
  model: ReadyModel | null;
}

export async function vectorsOfOtherDataset(src: GivenSource, other: StoredDataset, otherRows: number[]): Promise<Float32Array> {
  const d = src.rows.cols;
  const out = new Float32Array(otherRows.length * d);
  if (src.model) {
    const thumbs = join(other.dir, 'thumbs');
    for (let i = 0; i < otherRows.length; i++) {
      const v = await embedRows(src.model, thumbs, { start: otherRows[i], count: 1 }, { threads: src.ctx.computeThreads || 1, signal: src.ctx.signal });
      out.set(v, i * d);
    }
    return out;
  }
  if (other.meta.cols !== d) {
    throw new CairnError('DIMENSION_MISMATCH', `Dataset ${other.meta.id} has ${other.meta.cols} columns; the job's has ${d}.`, { datasetId: other.meta.id, expected: d, got: other.meta.cols });
  }
  otherRows.forEach((r, i) => out.set(other.readRows(r, 1), i * d));
  return out;
}

/** The fixed items of a job: ids looked up in their dataset; ITEM_NOT_FOUND names the first missing one. */
export async function resolveFixed(src: GivenSource, choice: FixedChoice): Promise<{ items: FixedItems; ids: string[] }> {
  const own = choice.datasetId === src.datasetId;
  const other = own ? null : openDataset(src.ctx.store.storeDir(src.ctx.ref.tenant), choice.datasetId);
  const ids = own ? src.ids : (await other!.readItems()).ids;
  const rowOf = new Map(ids.map((id, i) => [id, i]));
  const rows = choice.ids.map((id) => {
    const r = rowOf.get(id);
    if (r === undefined) throw new CairnError('ITEM_NOT_FOUND', `Item ${JSON.stringify(id)} is not in dataset ${choice.datasetId}.`, { id, datasetId: choice.datasetId });
    return r;
  });
  if (own) return { items: { vectors: src.rows.gather(rows), rows: Int32Array.from(rows) }, ids: choice.ids };
  return { items: { vectors: await vectorsOfOtherDataset(src, other!, rows), rows: new Int32Array(rows.length).fill(-1) }, ids: choice.ids };
}

/**
 * An earlier job's representatives for a stable re-selection: matched by id to rows of the job's
 * dataset; the others take their vectors from the earlier job's dataset when it still exists (and
 * fits), and are left out otherwise (`dropped`).
 */
export async function resolvePrevious(src: GivenSource, choice: PreviousChoice): Promise<{ previous: PreviousSelection; dropped: number; jobId: string }> {
  const { store, ref } = src.ctx;
  const earlier = JSON.parse(await store.readText({ kind: 'job', tenant: ref.tenant, id: choice.jobId }, 'result.json')) as ResultDocument;
  const rowOf = new Map(src.ids.map((id, i) => [id, i]));
  const matched: Array<{ row: number; earlierIndex: number }> = earlier.representatives.map((r) => ({ row: rowOf.get(r.id) ?? -1, earlierIndex: r.index }));
  const missing = matched.filter((m) => m.row < 0);
  let otherVectors: Float32Array | null = null;
  if (missing.length) {
    try {
      const other = openDataset(store.storeDir(ref.tenant), earlier.dataset.id ?? '');
      otherVectors = await vectorsOfOtherDataset(src, other, missing.map((m) => m.earlierIndex));
    } catch {
      otherVectors = null; // the earlier dataset is gone or does not fit: those items are left out
    }
  }
  const kept = otherVectors ? matched : matched.filter((m) => m.row >= 0);
  const d = src.rows.cols;
  const vectors = new Float32Array(kept.length * d);
  let nextMissing = 0;
  kept.forEach((m, i) => {
    if (m.row >= 0) vectors.set(src.rows.read(m.row, 1), i * d);
    else vectors.set(otherVectors!.subarray(nextMissing * d, ++nextMissing * d), i * d);
  });
  return {
    previous: { vectors, rows: Int32Array.from(kept, (m) => m.row), strength: choice.strength },
    dropped: matched.length - kept.length,
    jobId: choice.jobId,
  };
}

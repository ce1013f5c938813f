import { existsSync } from 'node:fs';
import { rm } from 'node:fs/promises';
import { join } from 'node:path';
import { projectSample } from '../report/report-data.js';
import { createBackend } from '../compute/create-backend.js';
import { decodeCheckpoint, encodeCheckpoint } from '../core/checkpoint.js';
import { parseSelectOptions } from '../core/options.js';
import type { RowSource } from '../core/rows.js';
import type { SpaceRecipe } from '../core/space.js';
import { select } from '../core/select.js';
import { openDataset } from '../data/dataset-store.js';
import { itemLookup } from '../data/stored-dataset.js';
import { closeRows, openRows } from '../data/file-rows.js';
import { labelCodes } from '../data/label-codes.js';
import { encodeAssignments } from './assignments.js';
import type { ProcessorContext } from './processor.js';
import { EmbeddingCache } from './embedding-cache.js';
import { ensureEmbedding, modelForJob } from './embedding-step.js';
import { resultDocument, resultSummary, rowsNamed, type ResultDocument } from './result-document.js';
import { resolveFixed, resolvePrevious, type GivenSource } from './given-vectors.js';
import { shardedPasses, type PassRecord, type PassSource } from './pass-shards.js';
import type { SelectSpec } from './task.js';

/**
 * Runs one selection on a stored dataset. Every `checkpointEveryMs` the descent's state goes to
 * checkpoint.json; a later attempt (after a crash, a killed worker or a shutdown) continues from it
 * and returns what an uninterrupted run would have. Writes result.json and assignments.bin.
 */
export async function selectProcessor(ctx: ProcessorContext): Promise<void> {
  const { store, ref } = ctx;
  const spec = await store.readSpec<SelectSpec>(ref);
  const options = parseSelectOptions(spec.options);
  const dataset = openDataset(store.storeDir(ref.tenant), spec.datasetId);
  const { meta } = dataset;
  // Every id and label only when labels or named items need them; otherwise the result reads just
  // the ids of the rows it names (a million ids held through the selection cost ~80 MB of heap).
  const items = meta.hasLabels || spec.fixed || spec.previous ? await dataset.readItems() : null;
  /**
   * The job's rows in its source space: in memory when they fit the memory budget, else read from
   * the file on demand. Loaded again for a second run (select() transforms rows in memory in place).
   */
  let loadRows: () => Promise<RowSource>;
  const opened: RowSource[] = [];
  const budget = ctx.memoryBudgetBytes;
  let embedding: ResultDocument['embedding'];
  if (spec.embedding) {
    // The embedding first (from the cache, the job's shard tasks, or computed here), then the
    // selection runs on the embedded vectors in the job's space.
    const started = performance.now();
    const cache = new EmbeddingCache(join(store.embeddingsDir(ref.tenant, spec.datasetId), spec.embedding.cacheKey));
    const thumbs = join(dataset.dir, 'thumbs');
    const { meta: em, computedRows } = await ensureEmbedding(ctx, cache, thumbs, spec.embedding, meta.rows, (f) => ctx.onProgress({ phase: 'embed', fraction: 0.3 * f }));
    loadRows = async () => track(openRows(cache.matrixPath, em.rows, em.dim, budget));
    embedding = { model: em.model, modelSha256: em.modelSha256, normalize: em.normalize, dims: em.dim, computedRowsInThisTask: computedRows, seconds: (performance.now() - started) / 1000 };
  } else {
    loadRows = async () => track(dataset.rowSource(budget));
  }
  function track(rows: RowSource): RowSource {
    opened.push(rows);
    return rows;
  }
  // A pass an earlier attempt left behind is of no use (its points were that attempt's).
  await rm(join(store.dir(ref), 'passes'), { recursive: true, force: true });
  const rows = await loadRows();
  // Full passes over more than one shard's rows are shared with other workers when there are any.
  const passRecords: PassRecord[] = [];
  const passSource: PassSource = spec.embedding ? { kind: 'embedding', datasetId: spec.datasetId, cacheKey: spec.embedding.cacheKey } : { kind: 'dataset', datasetId: spec.datasetId };
  const passes =
    ctx.spawn && ctx.passShardRows > 0
      ? (recipe: SpaceRecipe) => shardedPasses({ store, parent: ref, source: passSource, recipe, shardRows: ctx.passShardRows, spawn: ctx.spawn!, withdraw: ctx.withdraw, signal: ctx.signal, onPass: (r) => passRecords.push(r) })
      : undefined;
  try {
    const labels = items && meta.hasLabels ? labelCodes(items.labels) : null;

    // Items the job names, gathered before the selection transforms the rows in place.
    const given: GivenSource = { ctx, datasetId: spec.datasetId, rows, ids: items?.ids ?? [], model: spec.embedding ? await modelForJob(ctx.modelsDir, spec.embedding) : null };
    const fixed = spec.fixed ? await resolveFixed(given, spec.fixed) : null;
    const previous = spec.previous ? await resolvePrevious(given, spec.previous) : null;
    const f = fixed?.ids.length ?? 0;

    const saved = await store.readOptional(ref, 'checkpoint.json');
    // The checkpoint holds k + f points (the fixed ones never move), in the selection space.
    const resume = saved ? decodeCheckpoint(saved, options.k + f) : null;

    // Rows read from their file mean memory is tight: no ORT arenas holding each graph's peak buffers.
  const backend = await createBackend('onnx', { ...(ctx.computeThreads > 0 ? { threads: ctx.computeThreads } : {}), memoryArena: rows.resident });
    try {
      let assignments: Buffer | null = null;
      const result = await select(rows, spec.options, {
        backend,
        labels,
        signal: ctx.signal,
        sourceIsScratch: true,
        memoryBudgetBytes: budget,
        fixed: fixed?.items,
        previous: previous?.previous,
        // With an embedding, the selection's own progress fills the last 70% (60%, and then the
        // unconstrained comparison run 10%, for a stable re-selection).
        onProgress: (p) => ctx.onProgress({ ...p, fraction: (spec.embedding ? 0.3 : 0) + (previous ? 0.85 : 1) * (spec.embedding ? 0.7 : 1) * p.fraction }),
        checkpoint: {
          everyMs: ctx.checkpointEveryMs,
          resume,
          save: (cp) => store.writeAtomic(ref, 'checkpoint.json', encodeCheckpoint(cp)),
        },
        onAssignments: (rank, distance) => {
          assignments = encodeAssignments(rank, distance);
        },
        passes,
      });
      if (!assignments) throw new Error('the selection reported no assignments');
      await store.writeAtomic(ref, 'assignments.bin', assignments);
      let stabilityCost: ResultDocument['stabilityCost'];
      if (previous) {
        // What stability costs: the same selection without the earlier set (same seed, same fixed items).
        // The first run transformed `rows` in place, so the comparison reads them again rather than
        // keeping a second copy in memory during the first run.
        const plain = await select(await loadRows(), spec.options, { backend, signal: ctx.signal, sourceIsScratch: true, memoryBudgetBytes: budget, fixed: fixed?.items, passes });
        const value = result.discrepancy.value;
        stabilityCost = { previousJobId: previous.jobId, droppedPrevious: previous.dropped, unconstrainedD2: plain.discrepancy.value, ratio: plain.discrepancy.value > 0 ? value / plain.discrepancy.value : null };
      }
      const doc: ResultDocument = {
        ...resultDocument(result, items ? itemLookup(items) : await dataset.readItemsAt(rowsNamed(result)), meta, { id: spec.datasetId, source: meta.sourceName }, fixed ? { ids: fixed.ids, datasetId: spec.fixed!.datasetId } : null),
        ...(embedding ? { embedding } : {}),
        ...(stabilityCost ? { stabilityCost } : {}),
      };
      // The report page's map of a vector dataset: a projection of a row sample on its first two
      // principal axes, computed here rather than on the API's event loop.
      if (!existsSync(join(dataset.dir, 'thumbs')) && !spec.embedding) {
        await store.writeAtomic(ref, 'projection.json', JSON.stringify(await projectSample(dataset, doc)));
      }
      if (passRecords.length) await store.writeAtomic(ref, 'passes.json', JSON.stringify(passRecords) + '\n');
      await store.writeAtomic(ref, 'summary.json', JSON.stringify(resultSummary(doc)) + '\n');
      await store.writeAtomic(ref, 'result.json', JSON.stringify(doc) + '\n');
      await store.removeFile(ref, 'checkpoint.json');
    } finally {
      await backend.dispose();
    }
  } finally {
    opened.forEach(closeRows);
  }
}

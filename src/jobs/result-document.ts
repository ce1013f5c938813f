import type { SelectionResult } from '../core/result.js';
import type { ItemLookup, StoredDatasetMeta } from '../data/stored-dataset.js';

/** A selection result as users receive it (CLI output, the API's result): the engine's result with item ids and the dataset's description. */
export type ResultDocument = Omit<SelectionResult, 'representatives' | 'coverage' | 'fixed'> & {
  dataset: { id?: string; source: string; format: string; rows: number; cols: number; sha256: string; droppedNonFinite: number; skippedImages: number };
  representatives: Array<SelectionResult['representatives'][number] & { id: string; label: string | null }>;
  coverage: Omit<SelectionResult['coverage'], 'worstCovered'> & {
    worstCovered: Array<SelectionResult['coverage']['worstCovered'][number] & { id: string }>;
  };
  /** The fixed items with their ids (the engine's `fixed`, plus `id` and the dataset they come from). */
  fixed: Array<NonNullable<SelectionResult['fixed']>[number] & { id: string; datasetId: string }> | null;
  /** Stable re-selection: the earlier job, earlier representatives left out (gone with their dataset), and D² of the same selection without the earlier set. */
  stabilityCost?: { previousJobId: string; droppedPrevious: number; unconstrainedD2: number; ratio: number | null };
  /** Present when the selection ran on a model's embedding of the images (the selection space is then built from it). */
  embedding?: { model: string; modelSha256: string; normalize: boolean; dims: number; computedRowsInThisTask: number; seconds: number };
};

/** The rows a result document names (representatives, worst-covered items): the ids it needs. */
export function rowsNamed(result: SelectionResult): number[] {
  return [...result.representatives.map((r) => r.index), ...result.coverage.worstCovered.map((w) => w.index)];
}

export function resultDocument(
  result: SelectionResult,
  items: ItemLookup,
  meta: StoredDatasetMeta,
  dataset: { id?: string; source: string },
  fixed: { ids: string[]; datasetId: string } | null = null,
): ResultDocument {
  return {
    ...result,
    fixed: result.fixed && fixed ? result.fixed.map((x) => ({ ...x, id: fixed.ids[x.position], datasetId: fixed.datasetId })) : null,
    dataset: {
      ...(dataset.id ? { id: dataset.id } : {}),
      source: dataset.source,
      format: meta.format,
      rows: meta.rows,
      cols: meta.cols,
      sha256: meta.sha256,
      droppedNonFinite: meta.droppedNonFinite,
      skippedImages: meta.skippedImages,
    },
    representatives: result.representatives.map((r) => ({ ...r, id: items.id(r.index), label: items.label(r.index) })),
    coverage: {
      ...result.coverage,
      worstCovered: result.coverage.worstCovered.map((w) => ({ ...w, id: items.id(w.index) })),
    },
  };
}

/** The few numbers a dashboard lists per job (summary.json, kept beside the large result). */
export interface ResultSummary {
  k: number;
  d2: number;
  ratioToRandom: number | null;
  seconds: number;
}

export function resultSummary(doc: ResultDocument): ResultSummary {
  const seconds = Object.values(doc.trace.seconds).reduce((a, b) => a + b, 0);
  return { k: doc.k, d2: doc.discrepancy.value, ratioToRandom: doc.discrepancy.ratioToRandom, seconds };
}

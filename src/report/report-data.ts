import { createReadStream, existsSync } from 'node:fs';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { Rng } from '../core/random.js';
import { ITEMS_FILE, THUMBS_DIR } from '../data/dataset-writer.js';
import { META_FILE, type StoredDataset } from '../data/stored-dataset.js';
import type { ResultDocument } from '../jobs/result-document.js';
import type { TaskStore } from '../jobs/task-store.js';
import type { IngestSpec, SelectSpec, TaskRef } from '../jobs/task.js';
import { principalAxes, projectRows } from './projection.js';
import type { ReportInput, ScatterInput } from './report-page.js';

export interface LoadReportOptions {
  /** Rows sampled for the projection of a vector dataset. Default 2,000. */
  sampleRows?: number;
  /** Representatives drawn on the projection (the first by rank). Default 1,000. */
  markedRepresentatives?: number;
}

/** Seeds the row sample together with the job's seed: the same job always draws the same sample. */
const SAMPLE_SEED_SALT = 0x7e907;
/** Adjacent sampled rows are read in one positional read while the span stays below this. */
const READ_SPAN_BYTES = 4 * 1024 * 1024;

/**
 * Everything the report page of a completed job needs, from the job folder and the stored
 * dataset: the result, the job's and dataset's names and times, and for vector datasets the map
 * the worker saved (projection.json, see projectSample). A dataset deleted since the job ran still
 * gives a page (from the result alone).
 */
export async function loadReportInput(store: TaskStore, ref: TaskRef, spec: SelectSpec): Promise<ReportInput> {
  const [resultText, state] = await Promise.all([store.readText(ref, 'result.json'), store.readState(ref)]);
  const result = JSON.parse(resultText) as ResultDocument;
  const dsRef: TaskRef = { kind: 'dataset', tenant: ref.tenant, id: spec.datasetId };
  const dsSpec = await store.readSpec<IngestSpec>(dsRef).catch(() => null);
  const storeDir = store.storeDir(ref.tenant);
  const dir = join(storeDir, spec.datasetId);
  const available = existsSync(join(dir, META_FILE));
  const hasImages = available && existsSync(join(dir, THUMBS_DIR));

  // The map of a vector dataset is computed by the worker when the job ends (projection.json): the
  // power iteration is too heavy for the API's event loop. Jobs without it get no map.
  let scatter: ScatterInput | null = null;
  if (available && !hasImages) {
    const text = await store.readOptional(ref, 'projection.json');
    scatter = text ? (JSON.parse(text) as ScatterInput) : null;
  }
  return {
    job: { id: ref.id, name: spec.name ?? null, createdAt: spec.createdAt ?? null, startedAt: state.startedAt, finishedAt: state.finishedAt },
    dataset: {
      id: spec.datasetId,
      name: dsSpec?.name ?? null,
      source: result.dataset?.source ?? dsSpec?.sourceName ?? '',
      format: result.dataset?.format ?? dsSpec?.format ?? '',
      rows: result.dataset?.rows ?? result.rows,
      cols: result.dataset?.cols ?? result.dims,
      hasImages,
      available,
    },
    result,
    scatter,
  };
}

/** The sample's projection on its first two principal axes (in the job's space: standardized columns when it was `standardize`). */
export async function projectSample(dataset: StoredDataset, result: ResultDocument, options: LoadReportOptions = {}): Promise<ScatterInput> {
  const { rows, cols } = dataset.meta;
  const n = Math.min(rows, options.sampleRows ?? 2000);
  const sample = Array.from(new Rng((result.seed ^ SAMPLE_SEED_SALT) >>> 0).sample(rows, n)).sort((a, b) => a - b);
  const sampleRows = gatherRows(dataset, sample);
  // The page is built in the request, so each axis's power iteration gets about 10⁸ multiply-adds
  // (2,000 rows of 768 columns: 32 steps, well under a second). A picture needs no more: an axis not
  // converged by then lies in a plane of nearly equal variance, where any direction draws alike.
  const maxIterations = Math.max(20, Math.min(300, Math.floor(1e8 / (2 * n * cols))));
  const axes = principalAxes(sampleRows, n, cols, { components: 2, standardize: result.space === 'standardize', seed: result.seed, maxIterations, tolerance: 1e-10 });
  const xy = padTo2(projectRows(sampleRows, n, axes), n, axes.axes.length);

  const reps = result.representatives.slice(0, options.markedRepresentatives ?? 1000);
  const repRows = gatherRows(dataset, reps.map((r) => r.index));
  const repXy = padTo2(projectRows(repRows, reps.length, axes), reps.length, axes.axes.length);

  const labels = dataset.meta.hasLabels ? await labelsOf(join(dataset.dir, ITEMS_FILE), sample) : null;
  const total = axes.totalVariance > 0 ? axes.totalVariance : 1;
  return {
    points: sample.map((_, i) => ({ x: xy[i * 2], y: xy[i * 2 + 1], label: labels?.[i] ?? null })),
    representatives: reps.map((r, i) => ({ rank: r.rank, x: repXy[i * 2], y: repXy[i * 2 + 1], weight: r.weight })),
    rows,
    explained: [(axes.variances[0] ?? 0) / total, (axes.variances[1] ?? 0) / total],
    standardized: result.space === 'standardize',
  };
}

/** One-column data has one axis: its points go on a line (y = 0). */
function padTo2(values: Float64Array, rows: number, components: number): Float64Array {
  if (components === 2) return values;
  const out = new Float64Array(rows * 2);
  for (let i = 0; i < rows; i++) out[i * 2] = values[i * components];
  return out;
}

/** The given rows (any order, repeats allowed) as one row-major matrix, read in few positional reads. */
export function gatherRows(dataset: StoredDataset, indices: readonly number[]): Float32Array {
  const { cols } = dataset.meta;
  const out = new Float32Array(indices.length * cols);
  const order = indices.map((row, at) => ({ row, at })).sort((a, b) => a.row - b.row);
  const spanRows = Math.max(1, Math.floor(READ_SPAN_BYTES / (cols * 4)));
  for (let i = 0; i < order.length; ) {
    const start = order[i].row;
    let j = i;
    while (j + 1 < order.length && order[j + 1].row - start < spanRows) j++;
    const block = dataset.readRows(start, order[j].row - start + 1);
    for (let t = i; t <= j; t++) out.set(block.subarray((order[t].row - start) * cols, (order[t].row - start + 1) * cols), order[t].at * cols);
    i = j + 1;
  }
  return out;
}

/** Labels of the given rows (ascending), streaming items.jsonl only up to the last of them. */
async function labelsOf(itemsFile: string, sortedRows: readonly number[]): Promise<(string | null)[]> {
  const out: (string | null)[] = new Array<string | null>(sortedRows.length).fill(null);
  if (sortedRows.length === 0) return out;
  const input = createReadStream(itemsFile, 'utf8');
  const lines = createInterface({ input, crlfDelay: Infinity });
  let line = 0;
  let next = 0;
  try {
    for await (const text of lines) {
      while (next < sortedRows.length && sortedRows[next] === line) {
        out[next++] = (JSON.parse(text) as { label: string | null }).label ?? null;
      }
      line++;
      if (next >= sortedRows.length) break;
    }
  } catch {
    // Labels only colour the map; a damaged items file leaves it grey rather than failing the page.
    out.fill(null);
  } finally {
    lines.close();
    input.destroy();
  }
  return out;
}

import { mkdtemp, rm, writeFile } from 'node:fs/promises';
import { tmpdir, totalmem } from 'node:os';
import { basename, join } from 'node:path';
import type { ComputeBackend } from '../compute/backend.js';
import { createBackend, type BackendKind } from '../compute/create-backend.js';
import type { LabelCodes } from '../core/coverage.js';
import type { SelectOptionsInput } from '../core/options.js';
import type { SelectionResult } from '../core/result.js';
import type { DenseRows } from '../core/rows.js';
import { select } from '../core/select.js';
import { ingestFile, openDataset, type StoredDatasetMeta } from '../data/dataset-store.js';
import { closeRows, type FileRows } from '../data/file-rows.js';
import { labelCodes } from '../data/label-codes.js';
import { openNpyRows } from '../data/npy-rows.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../data/read-options.js';
import type { DatasetFormat, ReadOptions } from '../data/reader.js';
import { itemLookup, type ItemLookup } from '../data/stored-dataset.js';
import { resultDocument, rowsNamed, type ResultDocument } from '../jobs/result-document.js';
import { ProgressBar } from './progress-bar.js';

export interface SelectCommandInput {
  file: string;
  format?: DatasetFormat;
  read: ReadOptionOverrides;
  options: SelectOptionsInput;
  backend: BackendKind;
  out?: string;
  progress: boolean;
  /** See SelectContext.memoryBudgetBytes. Default: half of the physical memory. */
  memoryBudgetBytes?: number;
  /** false: ingest a float32 .npy too instead of reading it in place (tests compare the two). Default true. */
  readNpyInPlace?: boolean;
}

/** The CLI's result: the engine's result plus the item ids and where the data came from. */
export type CliResult = ResultDocument;

/** The input as select() and resultDocument() take it. */
interface OpenedInput {
  rows: DenseRows | FileRows;
  meta: StoredDatasetMeta;
  labels: LabelCodes | null;
  /** Ids and labels of at least the rows the result names. */
  lookup(result: SelectionResult): Promise<ItemLookup>;
}

/**
 * `cairn select FILE`: runs one selection in this process and writes the result JSON. A
 * little-endian float32 .npy is read in place (openNpyRows: into memory when it fits the budget,
 * else from the file on demand); any other input is ingested into a private temporary store (the
 * same readers and limits as the service), deleted afterwards, also on failure. Both give the same
 * checks, errors, ids and result document.
 */
export async function runSelectCommand(input: SelectCommandInput): Promise<CliResult> {
  const budget = input.memoryBudgetBytes ?? Math.floor(totalmem() / 2);
  const options = defaultReadOptions(input.read);
  let storeDir: string | null = null;
  let opened: OpenedInput | null = null;
  let backend: ComputeBackend | null = null;
  try {
    const inPlace = input.readNpyInPlace === false ? null : await openNpyRows(input.file, { format: input.format, datasetId: 'input', options, budgetBytes: budget });
    if (inPlace) {
      opened = { rows: inPlace.rows, meta: inPlace.meta, labels: null, lookup: () => Promise.resolve(inPlace.items) };
    } else {
      storeDir = await mkdtemp(join(tmpdir(), 'cairn-select-'));
      opened = await ingestInput(input, options, storeDir, budget);
    }
    const { rows, meta, labels } = opened;
    const bar = new ProgressBar(process.stderr, input.progress);
    // Rows read from their file mean memory is tight: no ORT arenas holding each graph's peak buffers.
    backend = await createBackend(input.backend, { memoryArena: rows.resident });
    const result = await select(rows, input.options, { backend, labels, sourceIsScratch: true, memoryBudgetBytes: budget, onProgress: (p) => bar.update(p) });
    const out: CliResult = resultDocument(result, await opened.lookup(result), meta, { source: basename(input.file) });
    const text = JSON.stringify(out, null, 2) + '\n';
    if (input.out) {
      await writeFile(input.out, text);
      if (input.progress) process.stderr.write(summary(out, input.out));
    } else {
      process.stdout.write(text);
    }
    return out;
  } finally {
    if (opened) closeRows(opened.rows);
    await backend?.dispose();
    if (storeDir) await rm(storeDir, { recursive: true, force: true });
  }
}

/** Ingests the input into `storeDir` and opens it within the budget. */
async function ingestInput(input: SelectCommandInput, options: ReadOptions, storeDir: string, budget: number): Promise<OpenedInput> {
  const meta = await ingestFile(input.file, { storeDir, datasetId: 'input', format: input.format, options });
  const dataset = openDataset(storeDir, 'input');
  // All ids and labels only for labels; otherwise just the ids of the rows the result names.
  const items = meta.hasLabels ? await dataset.readItems() : null;
  return {
    rows: dataset.rowSource(budget),
    meta,
    labels: items ? labelCodes(items.labels) : null,
    lookup: (result) => (items ? Promise.resolve(itemLookup(items)) : dataset.readItemsAt(rowsNamed(result))),
  };
}

/** A short human summary for stderr when the JSON went to a file. */
export function summary(r: CliResult, outFile: string): string {
  const lines = [`${r.k} representatives of ${r.rows} items (${r.dims}-d ${r.space} space, ${r.kernel.kind} kernel)`];
  lines.push('rank  weight  share   label         id');
  for (const rep of r.representatives.slice(0, 20)) {
    lines.push(`${String(rep.rank).padStart(4)}  ${rep.weight.toFixed(3)}   ${rep.share.toFixed(3)}   ${(rep.label ?? '-').padEnd(12).slice(0, 12)}  ${rep.id}`);
  }
  if (r.k > 20) lines.push(`  … ${r.k - 20} more in ${outFile}`);
  const d = r.discrepancy;
  lines.push(`D² = ${d.value.toPrecision(4)}; random k-subsets: ${d.random.median.toPrecision(4)} (ratio ${d.ratioToRandom === null ? 'n/a' : d.ratioToRandom.toFixed(3)})`);
  lines.push(`result written to ${outFile}`);
  return lines.join('\n') + '\n';
}

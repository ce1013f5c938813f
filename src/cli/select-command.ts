import { mkdtemp, rm, writeFile } from 'node:fs/promises';
import { tmpdir, totalmem } from 'node:os';
import { basename, join } from 'node:path';
import type { ComputeBackend } from '../compute/backend.js';
import { createBackend, type BackendKind } from '../compute/create-backend.js';
import type { DenseRows } from '../core/rows.js';
import type { SelectOptionsInput } from '../core/options.js';
import { select } from '../core/select.js';
import { ingestFile, openDataset } from '../data/dataset-store.js';
import { closeRows, type FileRows } from '../data/file-rows.js';
import { itemLookup } from '../data/stored-dataset.js';
import { labelCodes } from '../data/label-codes.js';
import { defaultReadOptions, type ReadOptionOverrides } from '../data/read-options.js';
import type { DatasetFormat } from '../data/reader.js';
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
}

/** The CLI's result: the engine's result plus the item ids and where the data came from. */
export type CliResult = ResultDocument;

/**
 * `cairn select FILE`: ingests the file into a private temporary store (the same readers and
 * limits as the service), runs one selection in this process and writes the result JSON.
 * The temporary store is deleted afterwards, also on failure.
 */
export async function runSelectCommand(input: SelectCommandInput): Promise<CliResult> {
  const storeDir = await mkdtemp(join(tmpdir(), 'cairn-select-'));
  let rows: DenseRows | FileRows | null = null;
  let backend: ComputeBackend | null = null;
  try {
    const meta = await ingestFile(input.file, {
      storeDir,
      datasetId: 'input',
      format: input.format,
      options: defaultReadOptions(input.read),
    });
    const dataset = openDataset(storeDir, 'input');
    const budget = input.memoryBudgetBytes ?? Math.floor(totalmem() / 2);
    // All ids and labels only for labels; otherwise just the ids of the rows the result names.
    const items = meta.hasLabels ? await dataset.readItems() : null;
    const labels = items ? labelCodes(items.labels) : null;
    const bar = new ProgressBar(process.stderr, input.progress);
    rows = dataset.rowSource(budget);
    // Rows read from their file mean memory is tight: no ORT arenas holding each graph's peak buffers.
    backend = await createBackend(input.backend, { memoryArena: rows.resident });
    const result = await select(rows, input.options, { backend, labels, sourceIsScratch: true, memoryBudgetBytes: budget, onProgress: (p) => bar.update(p) });
    const lookup = items ? itemLookup(items) : await dataset.readItemsAt(rowsNamed(result));
    const out: CliResult = resultDocument(result, lookup, meta, { source: basename(input.file) });
    const text = JSON.stringify(out, null, 2) + '\n';
    if (input.out) {
      await writeFile(input.out, text);
      if (input.progress) process.stderr.write(summary(out, input.out));
    } else {
      process.stdout.write(text);
    }
    return out;
  } finally {
    if (rows) closeRows(rows);
    await backend?.dispose();
    await rm(storeDir, { recursive: true, force: true });
  }
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

import { CairnError } from '../errors.js';
import { planColumns, type ColumnPlan } from './parquet-columns.js';
import { ParquetDecoderSession, type ColumnRequest, type DecodedColumn } from './parquet-decoder.js';
import { badFile, checkParquetMetadata, rowGroupBytes } from './parquet-file.js';
import type { DatasetReader, DatasetSink, ReadOptions, ReadSummary } from './reader.js';
import { checkFileSize, checkRows, throwIfAborted } from './reader-limits.js';
import { RowBatcher } from './row-batcher.js';

/**
 * Apache Parquet via hyparquet, one row group at a time: the decoder child process (see
 * parquet-decoder.ts) fetches the footer and each row group's column chunks with positional reads,
 * so memory follows the largest row group, not the file. Columns are chosen by planColumns. Null
 * vector elements (and null scalar features) are NaN and follow the nonFinite policy; a null
 * vector or id is PARQUET_NULL_VALUE. Labels: null is none.
 */

export const parquetReader: DatasetReader = {
  format: 'parquet',
  async read(path: string, sink: DatasetSink, options: ReadOptions): Promise<ReadSummary> {
    const size = await checkFileSize(path, options.limits);
    const decoder = new ParquetDecoderSession(path, size);
    try {
      const metadata = await decoder.open();
      checkParquetMetadata(metadata, size);
      const numRows = Number(metadata.num_rows);
      checkRows(numRows, options.limits);
      const plan = planColumns(metadata, options);
      const columns = columnsOf(plan);
      const batcher = new RowBatcher(sink, options);
      if (plan.vector.kind === 'scalars') await batcher.begin(plan.vector.names.length);

      let groupStart = 0;
      for (let g = 0; g < metadata.row_groups.length; g++) {
        throwIfAborted(options.signal);
        const groupRows = Number(metadata.row_groups[g].num_rows);
        if (groupRows === 0) continue;
        const bytes = rowGroupBytes(metadata, g, columns.map((c) => c.name));
        const decoded = await decoder.rows(groupStart, groupStart + groupRows, columns, bytes);
        await addRows(batcher, plan, decoded, groupRows);
        groupStart += groupRows;
        batcher.bytesRead = Math.round((size * groupStart) / numRows);
      }
      await batcher.finish();
      return {
        rows: batcher.rows,
        cols: batcher.cols,
        droppedNonFinite: batcher.droppedNonFinite,
        skippedImages: 0,
        hasLabels: plan.label !== undefined,
      };
    } finally {
      decoder.close();
    }
  },
};

/** The requested columns in order: id, label, then the vector column(s). */
function columnsOf(plan: ColumnPlan): ColumnRequest[] {
  const out: ColumnRequest[] = [];
  if (plan.id !== undefined) out.push({ name: plan.id, kind: 'text' });
  if (plan.label !== undefined) out.push({ name: plan.label, kind: 'text' });
  if (plan.vector.kind === 'list') out.push({ name: plan.vector.name, kind: 'list' });
  else for (const name of plan.vector.names) out.push({ name, kind: 'scalar' });
  return out;
}

async function addRows(batcher: RowBatcher, plan: ColumnPlan, decoded: DecodedColumn[], count: number): Promise<void> {
  let k = 0;
  const ids = plan.id !== undefined ? (decoded[k++] as unknown[]) : undefined;
  const labels = plan.label !== undefined ? (decoded[k++] as unknown[]) : undefined;
  const list = plan.vector.kind === 'list' ? (decoded[k] as { values: Float32Array; lengths: Int32Array }) : undefined;
  const scalars = plan.vector.kind === 'scalars' ? (decoded.slice(k) as Float32Array[]) : undefined;
  if ([ids, labels, list?.lengths, ...(scalars ?? [])].some((c) => c !== undefined && c.length !== count)) {
    throw badFile('parquet column length mismatch');
  }
  let offset = 0;
  for (let r = 0; r < count; r++) {
    const row = batcher.sourceRows;
    let id: string | null = null;
    if (ids && plan.id !== undefined) {
      if (ids[r] === null || ids[r] === undefined) throw nullValue(row, plan.id);
      id = scalarText(ids[r], plan.id);
    }
    const rawLabel = labels?.[r];
    const label = plan.label !== undefined && rawLabel !== null && rawLabel !== undefined ? scalarText(rawLabel, plan.label) : null;
    if (list && plan.vector.kind === 'list') {
      const length = list.lengths[r];
      if (length < 0) throw nullValue(row, plan.vector.name);
      if (!batcher.started) await batcher.begin(length);
      if (length !== batcher.cols) {
        throw new CairnError('PARQUET_RAGGED_VECTOR', `Row ${row} has ${length} values; the first vector has ${batcher.cols}.`, {
          row,
          column: plan.vector.name,
          expected: batcher.cols,
          got: length,
        });
      }
      batcher.slot().set(list.values.subarray(offset, offset + length));
      offset += length;
    } else if (scalars) {
      const slot = batcher.slot();
      for (let j = 0; j < scalars.length; j++) slot[j] = scalars[j][r];
    }
    if (batcher.commit(id, label)) await batcher.flush();
  }
}

/** Ids and labels as text. Dates become ISO strings; binary (non-UTF-8) values are not accepted. */
function scalarText(value: unknown, column: string): string {
  if (typeof value === 'string') return value;
  if (typeof value === 'number' || typeof value === 'bigint' || typeof value === 'boolean') return String(value);
  if (value instanceof Date && !Number.isNaN(value.getTime())) return value.toISOString();
  throw new CairnError('PARQUET_UNKNOWN_COLUMN', `The column ${JSON.stringify(column)} does not hold text or numbers.`, { column });
}

function nullValue(row: number, column: string): CairnError {
  return new CairnError('PARQUET_NULL_VALUE', `Row ${row} has a null ${JSON.stringify(column)}.`, { row, column });
}

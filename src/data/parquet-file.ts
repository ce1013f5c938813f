import type { FileMetaData } from 'hyparquet';
import { CairnError } from '../errors.js';

/**
 * Checks what the row-group reads rely on, before any of them: row counts that add up and are
 * safe integers, and column chunks that lie inside the file. (The footer itself is parsed in the
 * decoder child process, see parquet-decoder.ts.)
 */
export function checkParquetMetadata(metadata: FileMetaData, fileSize: number): void {
  const numRows = Number(metadata.num_rows);
  let sum = 0;
  for (const group of metadata.row_groups ?? []) {
    const rows = Number(group.num_rows);
    if (!Number.isSafeInteger(rows) || rows < 0) throw badFile(`parquet row group with ${rows} rows`);
    sum += rows;
    for (const chunk of group.columns ?? []) {
      const meta = chunk.meta_data;
      if (!meta) throw badFile('parquet column chunk without metadata');
      const start = Number(meta.dictionary_page_offset ?? meta.data_page_offset);
      const end = start + Number(meta.total_compressed_size);
      if (!(Number.isSafeInteger(start) && Number.isSafeInteger(end) && start >= 0 && start <= end && end <= fileSize)) {
        throw badFile('parquet column chunk outside the file');
      }
    }
  }
  if (!Number.isSafeInteger(numRows) || numRows !== sum) throw badFile('parquet row counts do not add up');
}

/** Bytes of the column chunks a row-group read fetches: scales the decoder's time-out. */
export function rowGroupBytes(metadata: FileMetaData, group: number, columns: readonly string[]): number {
  let bytes = 0;
  for (const chunk of metadata.row_groups[group].columns) {
    const top = chunk.meta_data?.path_in_schema[0];
    if (top !== undefined && columns.includes(top)) bytes += Number(chunk.meta_data?.total_compressed_size ?? 0);
  }
  return bytes;
}

/** PARQUET_BAD_FILE with a structural reason (offsets and types, never cell values). */
export function badFile(reason: unknown): CairnError {
  if (reason instanceof CairnError) return reason;
  const text = reason instanceof Error ? reason.name : String(reason).slice(0, 200);
  return new CairnError('PARQUET_BAD_FILE', `The Parquet file cannot be read: ${text}.`, { reason: text });
}

import { createReadStream } from 'node:fs';
import { parse, type CsvError } from 'csv-parse';
import { CairnError } from '../errors.js';
import { isFiniteNumericCell, parseNumericCell } from './numeric-cell.js';
import type { DatasetFormat, DatasetReader, DatasetSink, ReadOptions, ReadSummary } from './reader.js';
import { checkFileSize, MAX_RECORD_BYTES, streamChunkBytes } from './reader-limits.js';
import { RowBatcher } from './row-batcher.js';

/** Columns by role, resolved from the header. */
interface Layout {
  width: number;
  idIndex: number;
  labelIndex: number;
  features: number[];
  names: string[];
}

/**
 * CSV and TSV with a header row. The id column is options.idField, else a column named `id` if
 * any (else ids are row numbers); the label column likewise with `label`. Every other column is a
 * numeric feature. Names are matched after trimming; ids and labels are trimmed, an empty label is
 * null. Quoted fields may hold delimiters and newlines. Blank lines are skipped.
 */
function csvLikeReader(format: Extract<DatasetFormat, 'csv' | 'tsv'>): DatasetReader {
  const delimiter = format === 'csv' ? ',' : '\t';
  return {
    format,
    async read(path: string, sink: DatasetSink, options: ReadOptions): Promise<ReadSummary> {
      const size = await checkFileSize(path, options.limits);
      const input = createReadStream(path, { highWaterMark: streamChunkBytes(size) });
      const parser = parse({
        delimiter,
        bom: true,
        relax_column_count: true, // ragged rows are reported by this reader, with its own code
        skip_empty_lines: true,
        max_record_size: MAX_RECORD_BYTES,
        info: true,
      });
      input.on('error', (err) => parser.destroy(err));
      input.pipe(parser);
      const batcher = new RowBatcher(sink, options);
      let layout: Layout | undefined;
      try {
        for await (const { record, info } of parser as AsyncIterable<{ record: string[]; info: { lines: number } }>) {
          const line = info.lines;
          if (!layout) {
            layout = resolveLayout(record, options);
            await batcher.begin(layout.features.length);
            continue;
          }
          const row = batcher.sourceRows;
          if (record.length !== layout.width) {
            throw new CairnError('CSV_RAGGED_ROW', `Row ${row} (line ${line}) has ${record.length} cells; the header has ${layout.width}.`, {
              row,
              line,
              expected: layout.width,
              got: record.length,
            });
          }
          const slot = batcher.slot();
          const { features } = layout;
          for (let j = 0; j < features.length; j++) {
            const value = parseNumericCell(record[features[j]]);
            if (value === undefined) {
              const column = layout.names[features[j]];
              // The cell's text is left out: it may be personal data.
              throw new CairnError('CSV_NON_NUMERIC', `Row ${row} (line ${line}), column ${JSON.stringify(column)} is not a number.`, {
                row,
                line,
                column,
              });
            }
            slot[j] = value;
          }
          const id = layout.idIndex >= 0 ? record[layout.idIndex].trim() : null;
          const label = layout.labelIndex >= 0 ? record[layout.labelIndex].trim() || null : null;
          batcher.bytesRead = input.bytesRead;
          if (batcher.commit(id, label, { line })) await batcher.flush();
        }
      } catch (err) {
        throw translateParseError(err);
      } finally {
        input.destroy();
        parser.destroy();
      }
      if (!layout) throw new CairnError('DATASET_EMPTY');
      await batcher.finish();
      return {
        rows: batcher.rows,
        cols: batcher.cols,
        droppedNonFinite: batcher.droppedNonFinite,
        skippedImages: 0,
        hasLabels: layout.labelIndex >= 0,
      };
    },
  };
}

function resolveLayout(header: string[], options: ReadOptions): Layout {
  const names = header.map((name) => name.trim());
  const seen = new Set<string>();
  for (const name of names) {
    if (seen.has(name)) throw new CairnError('CSV_DUPLICATE_COLUMN', `Two columns are named ${JSON.stringify(name)}.`, { column: name });
    seen.add(name);
  }
  // pandas writes `DataFrame(array).to_csv(index=False)` with the header 0,1,2,…: a header all the same.
  const pandasDefault = names.every((name, i) => name === String(i));
  if (!pandasDefault && names.every(isFiniteNumericCell)) throw new CairnError('CSV_MISSING_HEADER');
  const find = (option: string | undefined, fallback: string, role: string): number => {
    if (option === undefined) return names.indexOf(fallback);
    const index = names.indexOf(option);
    if (index < 0) throw new CairnError('CSV_UNKNOWN_COLUMN', `The ${role} column ${JSON.stringify(option)} is not in the header.`, { column: option });
    return index;
  };
  const idIndex = find(options.idField, 'id', 'id');
  const labelIndex = find(options.labelField, 'label', 'label');
  if (idIndex >= 0 && idIndex === labelIndex) {
    throw new CairnError('INVALID_ARGUMENT', 'The id and label columns must differ.', { column: names[idIndex] });
  }
  const features = names.map((_, i) => i).filter((i) => i !== idIndex && i !== labelIndex);
  if (features.length === 0) throw new CairnError('DATASET_NO_FEATURES');
  return { width: names.length, idIndex, labelIndex, features, names };
}

/** csv-parse errors become CSV_MALFORMED with the line; their messages quote cell text, so they are not passed on. */
function translateParseError(err: unknown): unknown {
  if (err instanceof CairnError) return err;
  const csvError = err as CsvError & { lines?: number };
  if (typeof csvError?.code !== 'string' || !csvError.code.startsWith('CSV_') && csvError.code !== 'INVALID_OPENING_QUOTE') return err;
  const line = typeof csvError.lines === 'number' ? csvError.lines : undefined;
  if (csvError.code === 'CSV_MAX_RECORD_SIZE') {
    return new CairnError('DATASET_RECORD_TOO_LARGE', `A record near line ${line} is longer than ${MAX_RECORD_BYTES} characters.`, {
      line,
      limit: MAX_RECORD_BYTES,
    });
  }
  return new CairnError('CSV_MALFORMED', `The CSV cannot be parsed near line ${line} (${csvError.code}).`, { line, reason: csvError.code });
}

export const csvReader = csvLikeReader('csv');
export const tsvReader = csvLikeReader('tsv');

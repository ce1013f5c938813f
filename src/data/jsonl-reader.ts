import { CairnError } from '../errors.js';
import { readLines } from './line-splitter.js';
import type { DatasetReader, DatasetSink, ReadOptions, ReadSummary } from './reader.js';
import { checkFileSize, MAX_RECORD_BYTES, streamChunkBytes } from './reader-limits.js';
import { RowBatcher } from './row-batcher.js';

/**
 * JSON Lines: one object per line, e.g. {"id": "a7", "vector": [0.1, -2], "label": "cat"}.
 * Fields: the vector in options.vectorField (default `vector`): an array of numbers, where null
 * (pandas' NaN) and Python's bare NaN / Infinity tokens count as non-finite. The id in options.idField
 * (default `id`): a string or number; when the first record has none (and no idField was named),
 * ids are row numbers and no record may have one. The label in options.labelField (default `label`):
 * optional per line; strings, numbers and booleans become strings; null or absent means none.
 * Blank lines are skipped.
 */
export const jsonlReader: DatasetReader = {
  format: 'jsonl',
  async read(path: string, sink: DatasetSink, options: ReadOptions): Promise<ReadSummary> {
    const size = await checkFileSize(path, options.limits);
    const vectorField = options.vectorField ?? 'vector';
    const idField = options.idField ?? 'id';
    const labelField = options.labelField ?? 'label';
    const batcher = new RowBatcher(sink, options);
    let hasIds: boolean | undefined = options.idField !== undefined ? true : undefined;
    let hasLabels = false;

    for await (const { text, line, bytesRead } of readLines(path, MAX_RECORD_BYTES, streamChunkBytes(size))) {
      if (text.trim() === '') continue;
      const record = parseRecord(text, line);
      const row = batcher.sourceRows;

      const vector = own(record, vectorField);
      if (vector === undefined) {
        throw new CairnError('JSONL_MISSING_VECTOR', `Line ${line} has no ${JSON.stringify(vectorField)} field.`, { row, line, field: vectorField });
      }
      if (!Array.isArray(vector)) {
        throw new CairnError('JSONL_BAD_VECTOR', `Line ${line}: ${JSON.stringify(vectorField)} is not an array.`, { row, line, field: vectorField });
      }
      if (!batcher.started) await batcher.begin(vector.length);
      if (vector.length !== batcher.cols) {
        throw new CairnError('JSONL_RAGGED_VECTOR', `Line ${line} has ${vector.length} values; the first vector has ${batcher.cols}.`, {
          row,
          line,
          expected: batcher.cols,
          got: vector.length,
        });
      }
      const slot = batcher.slot();
      for (let j = 0; j < vector.length; j++) {
        const v: unknown = vector[j];
        if (typeof v === 'number') slot[j] = v;
        else if (v === null) slot[j] = NaN;
        else throw new CairnError('JSONL_BAD_VECTOR', `Line ${line}: element ${j} of the vector is not a number.`, { row, line, index: j });
      }

      const rawId = own(record, idField);
      hasIds ??= rawId !== undefined;
      let id: string | null = null;
      if (hasIds) {
        if (typeof rawId === 'string') id = rawId;
        else if (typeof rawId === 'number' && Number.isFinite(rawId)) id = String(rawId);
        else throw badField(line, row, idField, rawId === undefined ? 'is missing' : 'is not a string or number');
      } else if (rawId !== undefined) {
        throw badField(line, row, idField, 'is present although the first record has none');
      }

      const rawLabel = own(record, labelField);
      let label: string | null = null;
      if (typeof rawLabel === 'string' || typeof rawLabel === 'number' || typeof rawLabel === 'boolean') label = String(rawLabel);
      else if (rawLabel !== undefined && rawLabel !== null) throw badField(line, row, labelField, 'is not a string, number or boolean');
      if (label !== null) hasLabels = true;

      batcher.bytesRead = bytesRead;
      if (batcher.commit(id, label, { line })) await batcher.flush();
    }
    await batcher.finish();
    return { rows: batcher.rows, cols: batcher.cols, droppedNonFinite: batcher.droppedNonFinite, skippedImages: 0, hasLabels };
  },
};

/** Own properties only: a field named e.g. "constructor" must not find Object.prototype's. */
function own(record: Record<string, unknown>, field: string): unknown {
  return Object.hasOwn(record, field) ? record[field] : undefined;
}

function badField(line: number, row: number, field: string, problem: string): CairnError {
  return new CairnError('JSONL_BAD_FIELD', `Line ${line}: field ${JSON.stringify(field)} ${problem}.`, { row, line, field });
}

function parseRecord(text: string, line: number): Record<string, unknown> {
  let value: unknown;
  try {
    value = JSON.parse(text);
  } catch {
    value = /NaN|Infinity/.test(text) ? parseWithPythonNonFinite(text) : undefined;
  }
  if (typeof value !== 'object' || value === null || Array.isArray(value)) {
    throw new CairnError('JSONL_BAD_LINE', `Line ${line} is not a JSON object.`, { line });
  }
  return value as Record<string, unknown>;
}

/**
 * Python's json module writes NaN, Infinity and -Infinity as bare tokens, which JSON.parse rejects.
 * They are replaced by null (read as NaN) outside strings, and the line parsed again.
 */
function parseWithPythonNonFinite(text: string): unknown {
  let out = '';
  let i = 0;
  while (i < text.length) {
    const c = text[i];
    if (c === '"') {
      const start = i++;
      while (i < text.length && text[i] !== '"') i += text[i] === '\\' ? 2 : 1;
      out += text.slice(start, ++i);
      continue;
    }
    const token = /^-?Infinity|^NaN/.exec(text.slice(i, i + 9));
    if (token) {
      out += 'null';
      i += token[0].length;
      continue;
    }
    out += c;
    i++;
  }
  try {
    return JSON.parse(out);
  } catch {
    return undefined;
  }
}

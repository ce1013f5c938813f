import { brotliCompressSync, constants, gzipSync } from 'node:zlib';
import { parquetWriteBuffer, type SchemaElement } from 'hyparquet-writer';

/** A dataset as every format should read it back. */
export interface Dataset {
  rows: number;
  cols: number;
  matrix: Float32Array;
  ids: string[];
  labels: (string | null)[];
}

/** Small, fast, seeded PRNG (mulberry32) so fixtures are identical run to run. */
export function prng(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

const LABELS = ['cat', 'dog', 'Ünïcødé 🐱', 'with, comma', 'quote "q"'];

/**
 * rows × cols float32 values spanning magnitudes 1e-4..1e4 of both signs, plus values that only
 * survive with full float32 precision (1/3, the smallest subnormal, the largest float32). Ids are
 * strings (one with a comma and quotes, to exercise CSV quoting); every 7th label is null.
 */
export function makeDataset(rows = 37, cols = 5, seed = 1): Dataset {
  const rand = prng(seed);
  const matrix = new Float32Array(rows * cols);
  for (let i = 0; i < matrix.length; i++) {
    matrix[i] = (rand() * 2 - 1) * 10 ** (rand() * 8 - 4);
  }
  matrix[0] = 1 / 3;
  matrix[1] = -1.401298464324817e-45;
  if (matrix.length > 2) matrix[2] = 3.4028234663852886e38;
  const ids = Array.from({ length: rows }, (_, i) => (i === 5 ? 'odd, "id"' : `item-${String(i).padStart(3, '0')}`));
  const labels = Array.from({ length: rows }, (_, i) => (i % 7 === 3 ? null : LABELS[i % LABELS.length]));
  return { rows, cols, matrix, ids, labels };
}

export type NpyDtype = '<f4' | '<f8' | '|u1';

/** A .npy file. `header` overrides the dict text; `version` picks the 1.0 / 2.0 / 3.0 layout. */
export function npyBytes(
  data: Float32Array | Float64Array | Uint8Array,
  shape: number[],
  options: { dtype?: string; version?: 1 | 2 | 3; fortran?: boolean; header?: string } = {},
): Buffer {
  const version = options.version ?? 1;
  const dtype = options.dtype ?? (data instanceof Float64Array ? '<f8' : data instanceof Uint8Array ? '|u1' : '<f4');
  const shapeText = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
  let dict = options.header ?? `{'descr': '${dtype}', 'fortran_order': ${options.fortran ? 'True' : 'False'}, 'shape': ${shapeText}, }`;
  const lengthBytes = version === 1 ? 2 : 4;
  const unpadded = 8 + lengthBytes + Buffer.byteLength(dict, 'utf8') + 1;
  dict += ' '.repeat((64 - (unpadded % 64)) % 64) + '\n';
  const headerText = Buffer.from(dict, version === 3 ? 'utf8' : 'latin1');
  const prefix = Buffer.alloc(8 + lengthBytes);
  Buffer.from('\x93NUMPY', 'latin1').copy(prefix);
  prefix[6] = version;
  prefix[7] = 0;
  if (version === 1) prefix.writeUInt16LE(headerText.length, 8);
  else prefix.writeUInt32LE(headerText.length, 8);
  return Buffer.concat([prefix, headerText, Buffer.from(data.buffer, data.byteOffset, data.byteLength)]);
}

/** Shortest text that reads back as the same float32. */
export function f32Text(v: number): string {
  return String(Math.fround(v));
}

function quoteCell(text: string, delimiter: string): string {
  return text.includes(delimiter) || /["\n\r]/.test(text) || text !== text.trim() ? `"${text.replaceAll('"', '""')}"` : text;
}

/** CSV / TSV with id first, features f0.., label last (null labels as empty cells). */
export function delimitedText(ds: Dataset, delimiter = ',', withIds = true, withLabels = true): string {
  const header = [...(withIds ? ['id'] : []), ...Array.from({ length: ds.cols }, (_, j) => `f${j}`), ...(withLabels ? ['label'] : [])];
  const lines = [header.join(delimiter)];
  for (let i = 0; i < ds.rows; i++) {
    const cells = Array.from(ds.matrix.subarray(i * ds.cols, (i + 1) * ds.cols), f32Text);
    if (withIds) cells.unshift(quoteCell(ds.ids[i], delimiter));
    if (withLabels) cells.push(quoteCell(ds.labels[i] ?? '', delimiter));
    lines.push(cells.join(delimiter));
  }
  return lines.join('\n') + '\n';
}

export function jsonlText(ds: Dataset): string {
  const lines: string[] = [];
  for (let i = 0; i < ds.rows; i++) {
    const vector = Array.from(ds.matrix.subarray(i * ds.cols, (i + 1) * ds.cols));
    lines.push(JSON.stringify({ id: ds.ids[i], vector, label: ds.labels[i] }));
  }
  return lines.join('\n') + '\n';
}

export interface ParquetFixtureOptions {
  /** 'list': one LIST<element> column; 'scalars': one column per feature. */
  layout?: 'list' | 'scalars';
  element?: 'FLOAT' | 'DOUBLE';
  codec?: 'UNCOMPRESSED' | 'SNAPPY' | 'GZIP' | 'BROTLI';
  rowGroupSize?: number;
  vectorName?: string;
}

const compressors = {
  GZIP: (input: Uint8Array) => new Uint8Array(gzipSync(input)),
  // Quality 4: the default (11) is slow and the tests only need valid brotli.
  BROTLI: (input: Uint8Array) => new Uint8Array(brotliCompressSync(input, { params: { [constants.BROTLI_PARAM_QUALITY]: 4 } })),
};

export function parquetBytes(ds: Dataset, options: ParquetFixtureOptions = {}): Buffer {
  const { layout = 'list', element = 'FLOAT', codec = 'SNAPPY', rowGroupSize = 10, vectorName = 'vector' } = options;
  const rowsOf = (i: number) => Array.from(ds.matrix.subarray(i * ds.cols, (i + 1) * ds.cols));
  const string = (name: string, optional: boolean): SchemaElement => ({
    name,
    type: 'BYTE_ARRAY',
    converted_type: 'UTF8',
    repetition_type: optional ? 'OPTIONAL' : 'REQUIRED',
  });
  const columnData = [{ name: 'id', data: ds.ids }];
  const schema: SchemaElement[] = [{ name: 'root', num_children: 0 }, string('id', false)];
  if (layout === 'list') {
    columnData.push({ name: vectorName, data: Array.from({ length: ds.rows }, (_, i) => rowsOf(i)) as never });
    schema.push(
      { name: vectorName, repetition_type: 'OPTIONAL', converted_type: 'LIST', num_children: 1 },
      { name: 'list', repetition_type: 'REPEATED', num_children: 1 },
      { name: 'element', type: element, repetition_type: 'REQUIRED' },
    );
  } else {
    for (let j = 0; j < ds.cols; j++) {
      columnData.push({ name: `f${j}`, data: Array.from({ length: ds.rows }, (_, i) => ds.matrix[i * ds.cols + j]) as never });
      schema.push({ name: `f${j}`, type: element, repetition_type: 'REQUIRED' });
    }
  }
  columnData.push({ name: 'label', data: ds.labels as never });
  schema.push(string('label', true));
  schema[0].num_children = columnData.length;
  const buffer = parquetWriteBuffer({ columnData, schema, codec, compressors, rowGroupSize, statistics: false });
  return Buffer.from(buffer);
}

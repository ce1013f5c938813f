import { open } from 'node:fs/promises';
import { basename } from 'node:path';
import { CairnError } from '../errors.js';
import type { DatasetFormat } from './reader.js';

const HEAD_BYTES = 4096;

const EXTENSIONS: readonly [string, DatasetFormat][] = [
  ['.npy', 'npy'],
  ['.csv', 'csv'],
  ['.tsv', 'tsv'],
  ['.tab', 'tsv'],
  ['.jsonl', 'jsonl'],
  ['.ndjson', 'jsonl'],
  ['.parquet', 'parquet'],
  ['.pq', 'parquet'],
  ['.zip', 'zip'],
  ['.tar', 'tar'],
  ['.tar.gz', 'tar'],
  ['.tgz', 'tar'],
];

/** Compressed text formats are not read; saying so beats a confusing error from the tar reader. */
const COMPRESSED_TEXT = /\.(csv|tsv|jsonl|ndjson|npy)\.(gz|bz2|xz|zst)$/i;

/**
 * Picks the reader for a file. Binary magic bytes win (a .npy, Parquet, zip, gzip or tar file is
 * recognised whatever its name); then the extension; then a look at the text: a first non-blank
 * character `{` means JSON Lines, a first line with tabs but no commas TSV, with commas CSV.
 */
export async function detectFormat(path: string, sourceName = basename(path)): Promise<DatasetFormat> {
  const name = sourceName.toLowerCase();
  const { head, tail } = await readEnds(path);
  const ascii = (bytes: Buffer, start: number, text: string) => bytes.toString('latin1', start, start + text.length) === text;

  if (COMPRESSED_TEXT.test(name)) {
    throw new CairnError('UNSUPPORTED_FORMAT', 'Compressed CSV, JSON Lines or .npy files are not supported; decompress them first.', {
      source: sourceName,
    });
  }
  if (ascii(head, 0, '\x93NUMPY')) return 'npy';
  if (ascii(head, 0, 'PAR1') && ascii(tail, 0, 'PAR1')) return 'parquet';
  if (ascii(head, 0, 'PK\x03\x04') || ascii(head, 0, 'PK\x05\x06')) return 'zip';
  if (head[0] === 0x1f && head[1] === 0x8b) return 'tar';
  if (ascii(head, 257, 'ustar')) return 'tar';

  for (const [ext, format] of EXTENSIONS) if (name.endsWith(ext)) return format;

  const text = head.toString('utf8').replace(/^\uFEFF/, '');
  const firstChar = text.trimStart()[0];
  if (firstChar === '{') return 'jsonl';
  const firstLine = text.split('\n', 1)[0];
  if (firstLine.includes('\t') && !firstLine.includes(',')) return 'tsv';
  if (firstLine.includes(',')) return 'csv';
  throw new CairnError('UNSUPPORTED_FORMAT', undefined, { source: sourceName });
}

async function readEnds(path: string): Promise<{ head: Buffer; tail: Buffer }> {
  let fh;
  try {
    fh = await open(path, 'r');
  } catch (err) {
    throw new CairnError('DATASET_SOURCE_UNREADABLE', undefined, { source: basename(path) }, { cause: err });
  }
  try {
    const { size } = await fh.stat();
    const head = Buffer.alloc(Math.min(HEAD_BYTES, size));
    await fh.read(head, 0, head.length, 0);
    const tail = Buffer.alloc(Math.min(4, size));
    await fh.read(tail, 0, tail.length, size - tail.length);
    return { head, tail };
  } finally {
    await fh.close();
  }
}

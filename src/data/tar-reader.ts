import { CairnError } from '../errors.js';
import { createReadStream } from 'node:fs';
import { open } from 'node:fs/promises';
import { Transform, type Readable, type TransformCallback } from 'node:stream';
import { createGunzip } from 'node:zlib';
import tar from 'tar-stream';
import { toArchiveError, type ArchiveEntry, type ByteBudget, type WalkContext } from './archive-entry.js';
import { readArchive } from './archive-ingest.js';
import type { DatasetReader } from './reader.js';

/**
 * Image datasets in tar archives, plain or gzip-compressed (recognised by the 1f 8b magic, not by
 * the file name). The archive is streamed from disk, entry by entry; see archive-ingest.ts for
 * what becomes a row, ids, labels (folders or labels.csv) and order.
 *
 * Only regular files and folders are accepted: symlinks, hard links, devices, FIFOs and unknown
 * entry types fail with ARCHIVE_UNSAFE_ENTRY. The limit on uncompressed bytes counts everything
 * that comes out of gunzip (headers and padding included), as it flows.
 */
export const tarReader: DatasetReader = {
  format: 'tar',
  read: (path, sink, options) => readArchive(walkTar, path, sink, options),
};

const ENTRY_KINDS: Record<string, ArchiveEntry['kind']> = {
  file: 'file',
  'contiguous-file': 'file',
  directory: 'directory',
};

async function* walkTar(path: string, context: WalkContext): AsyncGenerator<ArchiveEntry, void, undefined> {
  const gzipped = await hasGzipMagic(path);
  const file = createReadStream(path);
  const gunzip = gzipped ? createGunzip() : null;
  const counter = new BudgetStream(context.budget);
  const extract = tar.extract();
  // Node's pipe() does not forward errors: any stage failing ends the extract with that error,
  // which the iteration below then throws.
  const fail = (err: unknown): void => {
    extract.destroy(toArchiveError(err));
  };
  const stages: Readable[] = gunzip ? [file, gunzip, counter] : [file, counter];
  for (const stage of stages) stage.on('error', fail);
  (gunzip ? file.pipe(gunzip) : file).pipe(counter).pipe(extract);
  try {
    const entries = extract[Symbol.asyncIterator]();
    for (;;) {
      const next = await step(entries);
      if (next.done) return;
      const stream = next.value;
      const header = stream.header;
      // A size field tar-stream cannot parse (e.g. base-256 with the high bit set) comes back as
      // null, and the extract then waits forever for data that never comes: fail instead.
      if (header.size === null || header.size === undefined || !Number.isSafeInteger(header.size) || header.size < 0) {
        throw new CairnError('ARCHIVE_CORRUPT', undefined, { reason: 'unreadable entry size' });
      }
      // tar-stream gives null for type flags it does not know (sparse files, volume labels…).
      const type = header.type ?? 'unknown-type';
      const data = stream[Symbol.asyncIterator]() as AsyncIterator<Buffer>;
      // Our own generator instead of the stream's iterator: leaving a for-await over a
      // tar-stream entry destroys the whole extract, so unread data is drained below instead.
      let done = false;
      yield {
        name: header.name,
        kind: ENTRY_KINDS[type] ?? 'unsafe',
        reason: ENTRY_KINDS[type] ? undefined : `${type} entry`,
        declaredSize: header.size ?? 0,
        fileOffset: file.bytesRead,
        async *chunks() {
          for (;;) {
            const chunk = await step(data);
            if (chunk.done) break;
            yield chunk.value;
          }
          done = true;
        },
      };
      while (!done) {
        const chunk = await step(data);
        done = chunk.done === true;
      }
    }
  } finally {
    extract.destroy();
    counter.destroy();
    gunzip?.destroy();
    file.destroy();
  }
}

/** The iterator's next result, with library errors mapped to catalogued ones. */
async function step<T>(iterator: AsyncIterator<T>): Promise<IteratorResult<T>> {
  try {
    return await iterator.next();
  } catch (err) {
    throw toArchiveError(err);
  }
}

async function hasGzipMagic(path: string): Promise<boolean> {
  const handle = await open(path, 'r');
  try {
    const head = Buffer.alloc(2);
    const { bytesRead } = await handle.read(head, 0, 2, 0);
    return bytesRead === 2 && head[0] === 0x1f && head[1] === 0x8b;
  } finally {
    await handle.close();
  }
}

/** Passes bytes through, charging each to the walk's budget (which throws at the limit). */
class BudgetStream extends Transform {
  constructor(private readonly budget: ByteBudget) {
    super();
  }

  override _transform(chunk: Buffer, _encoding: BufferEncoding, callback: TransformCallback): void {
    try {
      this.budget.add(chunk.length);
      callback(null, chunk);
    } catch (err) {
      callback(err as Error);
    }
  }
}

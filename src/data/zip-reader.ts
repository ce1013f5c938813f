import type { Readable } from 'node:stream';
import yauzl from 'yauzl';
import { CairnError } from '../errors.js';
import { toArchiveError, type ArchiveEntry, type WalkContext } from './archive-entry.js';
import { readArchive } from './archive-ingest.js';
import type { DatasetReader } from './reader.js';

/**
 * Image datasets in zip archives, read with yauzl straight from the file: the central directory
 * entry by entry (lazyEntries), and each entry's data only when it is needed. See
 * archive-ingest.ts for what becomes a row, ids, labels (folders or labels.csv) and order
 * (central-directory order).
 *
 * yauzl's validateEntrySizes stays on, so an entry that inflates to more (or less) than the
 * central directory says fails with ARCHIVE_CORRUPT as soon as it overflows; the bytes that do
 * flow are also charged to maxUncompressedBytes. Entries whose Unix mode (the high 16 bits of
 * the external attributes) says symlink, device, FIFO or socket fail with ARCHIVE_UNSAFE_ENTRY;
 * encrypted entries and compression methods other than stored / deflate with
 * ARCHIVE_UNSUPPORTED_ENTRY. Paths are checked by cairn (decodeStrings is off) so that unsafe
 * ones get ARCHIVE_UNSAFE_PATH rather than a generic yauzl error.
 */
export const zipReader: DatasetReader = {
  format: 'zip',
  read: (path, sink, options) => readArchive(walkZip, path, sink, options),
};

const S_IFMT = 0o170000;
const S_IFREG = 0o100000;
const S_IFDIR = 0o040000;
const S_IFLNK = 0o120000;

async function* walkZip(path: string, context: WalkContext): AsyncGenerator<ArchiveEntry, void, undefined> {
  const zip = await openZip(path);
  // yauzl emits errors outside readEntry() too (closing the file); an unheard 'error' would crash.
  let failure: Error | null = null;
  zip.on('error', (err: Error) => {
    failure ??= toArchiveError(err);
  });
  try {
    if (zip.entryCount > context.limits.maxEntries) {
      throw new CairnError('ARCHIVE_TOO_MANY_ENTRIES', undefined, { maxEntries: context.limits.maxEntries });
    }
    for (;;) {
      if (failure) throw failure;
      const entry = await nextEntry(zip);
      if (entry === null) return;
      yield describe(zip, entry, context);
    }
  } finally {
    zip.close();
  }
}

function openZip(path: string): Promise<yauzl.ZipFile> {
  return new Promise((resolve, reject) => {
    const options = { lazyEntries: true, autoClose: false, decodeStrings: false, validateEntrySizes: true };
    try {
      yauzl.open(path, options, (err, zip) => (err ? reject(toArchiveError(err)) : resolve(zip)));
    } catch (err) {
      reject(toArchiveError(err));
    }
  });
}

function nextEntry(zip: yauzl.ZipFile): Promise<yauzl.Entry | null> {
  return new Promise((resolve, reject) => {
    const settle = (entry: yauzl.Entry | null, err?: Error): void => {
      zip.off('entry', onEntry).off('end', onEnd).off('error', onError);
      if (err) reject(toArchiveError(err));
      else resolve(entry);
    };
    const onEntry = (entry: yauzl.Entry): void => settle(entry);
    const onEnd = (): void => settle(null);
    const onError = (err: Error): void => settle(null, err);
    zip.on('entry', onEntry).on('end', onEnd).on('error', onError);
    try {
      zip.readEntry();
    } catch (err) {
      settle(null, err as Error);
    }
  });
}

function describe(zip: yauzl.ZipFile, entry: yauzl.Entry, context: WalkContext): ArchiveEntry {
  const name = yauzl.getFileNameLowLevel(entry.generalPurposeBitFlag, entry.fileNameRaw, entry.extraFields, false);
  const mode = (entry.externalFileAttributes >>> 16) & S_IFMT;
  let kind: ArchiveEntry['kind'] = 'file';
  let reason: string | undefined;
  if (mode === S_IFLNK) [kind, reason] = ['unsafe', 'symlink entry'];
  else if (mode !== 0 && mode !== S_IFREG && mode !== S_IFDIR) [kind, reason] = ['unsafe', `special file (mode ${mode.toString(8)})`];
  else if (mode === S_IFDIR || name.endsWith('/')) kind = 'directory';
  else if (entry.isEncrypted()) [kind, reason] = ['unsupported', 'encrypted entry'];
  else if (entry.compressionMethod !== 0 && entry.compressionMethod !== 8) {
    [kind, reason] = ['unsupported', `compression method ${entry.compressionMethod}`];
  }
  return {
    name,
    kind,
    reason,
    declaredSize: entry.uncompressedSize,
    fileOffset: entry.relativeOffsetOfLocalHeader + entry.compressedSize,
    async *chunks() {
      const stream = await openEntry(zip, entry);
      try {
        for await (const chunk of stream as AsyncIterable<Buffer>) {
          context.budget.add(chunk.length);
          yield chunk;
        }
      } catch (err) {
        throw toArchiveError(err);
      } finally {
        stream.destroy();
      }
    },
  };
}

function openEntry(zip: yauzl.ZipFile, entry: yauzl.Entry): Promise<Readable> {
  return new Promise((resolve, reject) => {
    try {
      zip.openReadStream(entry, (err, stream) => (err ? reject(toArchiveError(err)) : resolve(stream)));
    } catch (err) {
      reject(toArchiveError(err));
    }
  });
}

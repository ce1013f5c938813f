import { CairnError } from '../errors.js';
import type { ReaderLimits } from './reader.js';

/**
 * What the zip and tar walkers hand to the shared archive ingest: one entry at a time, in archive
 * order, with its bytes available as a stream that is read (or skipped) before the next entry.
 */
export interface ArchiveEntry {
  /** The path as stored in the archive, before normalisation. */
  readonly name: string;
  /** 'unsafe' (links, devices, FIFOs…) and 'unsupported' (encrypted…) entries are refused; `reason` says why. */
  readonly kind: 'file' | 'directory' | 'unsafe' | 'unsupported';
  readonly reason?: string;
  /** Uncompressed size from the entry's header. The walkers hold the data to it (or fail). */
  readonly declaredSize: number;
  /** Bytes of the archive file consumed up to the end of this entry, for progress reports. */
  readonly fileOffset: number;
  /**
   * The entry's uncompressed bytes. Call at most once; stopping early is allowed (the walker
   * skips the rest). Every byte passes the walk's ByteBudget; failures are CairnErrors.
   */
  chunks(): AsyncGenerator<Buffer, void, undefined>;
}

export interface WalkContext {
  limits: ReaderLimits;
  budget: ByteBudget;
}

/** Streams a zip or tar file's entries. Errors are CairnErrors; ending early releases the file. */
export type ArchiveWalker = (path: string, context: WalkContext) => AsyncGenerator<ArchiveEntry, void, undefined>;

/**
 * Counts decompressed bytes as they flow, so a small archive that expands without end (a "zip
 * bomb") is stopped at the limit rather than after it has been inflated.
 */
export class ByteBudget {
  private used = 0;

  constructor(private readonly limit: number) {}

  get bytes(): number {
    return this.used;
  }

  add(bytes: number): void {
    this.used += bytes;
    if (this.used > this.limit) {
      throw new CairnError('ARCHIVE_TOO_LARGE', undefined, { limit: 'maxUncompressedBytes', maxUncompressedBytes: this.limit });
    }
  }
}

/** Fails with ARCHIVE_ENTRY_TOO_LARGE when one entry's size passes maxEntryBytes. */
export function checkEntrySize(name: string, bytes: number, limits: ReaderLimits): void {
  if (bytes > limits.maxEntryBytes) {
    throw new CairnError('ARCHIVE_ENTRY_TOO_LARGE', undefined, { entry: name, maxEntryBytes: limits.maxEntryBytes });
  }
}

/**
 * Maps anything a zip / tar library or zlib throws to a catalogued error: CairnErrors pass
 * through, everything else means the bytes are not a valid archive.
 */
export function toArchiveError(err: unknown): CairnError {
  if (err instanceof CairnError) return err;
  const reason = err instanceof Error ? err.message : String(err);
  return new CairnError('ARCHIVE_CORRUPT', undefined, { reason }, { cause: err });
}

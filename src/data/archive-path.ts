import { CairnError } from '../errors.js';

/**
 * Entry paths inside zip and tar archives. An entry's normalized path is its item id, so two
 * spellings of one file ("./a\\b.png", "a//b.png") must give the same id, and nothing that could
 * name a file outside the archive (absolute paths, drive letters, `..`) is ever accepted, even
 * though cairn never writes entries to disk: ids end up in results that others may extract by.
 */

/**
 * Returns the path with forward slashes, no empty or `.` segments and no trailing slash.
 * Throws ARCHIVE_UNSAFE_PATH for absolute paths, drive letters, `..` segments, NUL bytes and
 * paths that are empty once normalized.
 */
export function normalizeEntryPath(raw: string): string {
  // Backslashes count as separators: a Windows-made archive's `..\x` is a traversal too.
  const slashed = raw.replace(/\\/g, '/');
  const unsafe = (reason: string): CairnError =>
    new CairnError('ARCHIVE_UNSAFE_PATH', `Archive entry path is unsafe (${reason}).`, { entry: raw, reason });
  if (slashed.includes('\0')) throw unsafe('NUL byte');
  if (slashed.startsWith('/')) throw unsafe('absolute path');
  if (/^[a-zA-Z]:/.test(slashed)) throw unsafe('drive letter');
  const segments: string[] = [];
  for (const segment of slashed.split('/')) {
    if (segment === '..') throw unsafe('".." segment');
    if (segment !== '' && segment !== '.') segments.push(segment);
  }
  if (segments.length === 0) throw unsafe('empty path');
  return segments.join('/');
}

/** The name of the folder directly holding the entry, or null for entries at the archive root. */
export function parentFolderName(normalized: string): string | null {
  const segments = normalized.split('/');
  return segments.length >= 2 ? segments[segments.length - 2] : null;
}

/** The lower-cased extension without the dot ('' when there is none). */
export function entryExtension(normalized: string): string {
  const base = normalized.slice(normalized.lastIndexOf('/') + 1);
  const dot = base.lastIndexOf('.');
  return dot > 0 ? base.slice(dot + 1).toLowerCase() : '';
}

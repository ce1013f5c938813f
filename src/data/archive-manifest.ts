import { parse } from 'csv-parse/sync';
import { CairnError } from '../errors.js';
import { normalizeEntryPath } from './archive-path.js';

/**
 * The optional label manifest of an image archive: a UTF-8 CSV file named `labels.csv` at the
 * archive root, with a header row naming (at least) the columns `path` and `label`:
 *
 *     path,label
 *     images/0001.png,gear
 *     images/0002.jpg,"bolt, long"
 *
 * `path` is the entry path inside the archive (normalized like ids: forward slashes, no leading
 * `./`). When the manifest is present it takes precedence over folder names: images it does not
 * list, and rows with an empty label, get no label. Rows naming entries that do not exist are
 * ignored. Other columns are ignored.
 */
export const MANIFEST_NAME = 'labels.csv';

/** Parses the manifest into normalized path → label. Throws ARCHIVE_BAD_MANIFEST. */
export function parseManifest(bytes: Buffer): Map<string, string | null> {
  let records: Record<string, string>[];
  const columns = (header: string[]): string[] => {
    if (!header.includes('path') || !header.includes('label')) {
      throw new Error('the header row must name the columns "path" and "label"');
    }
    return header;
  };
  try {
    records = parse(bytes, { columns, bom: true, skip_empty_lines: true, trim: true, relax_column_count: true });
  } catch (err) {
    throw bad(err instanceof Error ? err.message : String(err));
  }
  const labels = new Map<string, string | null>();
  for (let i = 0; i < records.length; i++) {
    const record = records[i];
    const rawPath = record.path ?? '';
    let path: string;
    try {
      path = normalizeEntryPath(rawPath);
    } catch {
      throw bad(`row ${i + 2}: path is empty or unsafe`);
    }
    if (labels.has(path)) throw bad(`row ${i + 2}: path is listed twice`);
    const label = record.label ?? '';
    labels.set(path, label === '' ? null : label);
  }
  return labels;
}

function bad(reason: string): CairnError {
  return new CairnError('ARCHIVE_BAD_MANIFEST', `The ${MANIFEST_NAME} manifest in the archive cannot be used: ${reason}.`, {
    entry: MANIFEST_NAME,
    reason,
  });
}

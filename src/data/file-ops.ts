import { randomBytes } from 'node:crypto';
import { access, rename, rm, writeFile } from 'node:fs/promises';

/** Whether something exists at `path`. */
export async function pathExists(path: string): Promise<boolean> {
  try {
    await access(path);
    return true;
  } catch {
    return false;
  }
}

/** A name beside `path` for writing before the rename; crash leftovers match `.tmp-` (swept at start). */
export function tempNameFor(path: string): string {
  return `${path}.tmp-${randomBytes(6).toString('hex')}`;
}

/**
 * Writes `path` under a temporary name and renames it into place, so readers see the whole new
 * file or the previous one, never a half-written one.
 */
export async function writeFileAtomic(path: string, data: string | Uint8Array): Promise<void> {
  const tmp = tempNameFor(path);
  try {
    await writeFile(tmp, data);
    await rename(tmp, path);
  } catch (err) {
    await rm(tmp, { force: true });
    throw err;
  }
}

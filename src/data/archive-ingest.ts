import { CairnError, requireArg } from '../errors.js';
import { ByteBudget, checkEntrySize, type ArchiveEntry, type ArchiveWalker } from './archive-entry.js';
import { MANIFEST_NAME, parseManifest } from './archive-manifest.js';
import { entryExtension, normalizeEntryPath, parentFolderName } from './archive-path.js';
import { ImageBatch } from './image-batch.js';
import { decodeImage, imageFeatureCount } from './image-features.js';
import { imageKindFromExtension, sniffImageKind, SNIFF_BYTES } from './image-header.js';
import type { DatasetSink, ReadOptions, ReadSummary } from './reader.js';
import { checkCols, checkFileSize, throwIfAborted } from './reader-limits.js';

/**
 * The image-archive reading shared by the zip and tar readers.
 *
 * Two passes over the archive. The first checks its structure (entry count, paths, entry types,
 * sizes) and reads the `labels.csv` manifest, so labels are known before the first
 * row is written and a structurally bad archive fails before anything reaches the sink. For zip
 * this pass reads only the central directory; a tar is streamed (and gunzipped) twice.
 * The second pass decodes the images. Rows are in archive order (the order of the central
 * directory for zip, of the stream for tar); ids are the normalized entry paths. Labels come
 * from labels.csv when the archive has one (see archive-manifest.ts), otherwise from the name of
 * the folder directly holding each image (`train/gear/1.png` → `gear`; none at the root);
 * hasLabels is true when at least one row got a label.
 *
 * An entry is an image when its bytes start with the PNG or JPEG magic, or its name ends in
 * .png / .jpg / .jpeg (such an entry with other bytes is an undecodable image). Other files and
 * folders are skipped but count toward maxEntries. Undecodable images follow image.onBadImage;
 * IMAGE_TOO_MANY_PIXELS is a limit and always fails.
 */
export async function readArchive(walk: ArchiveWalker, path: string, sink: DatasetSink, options: ReadOptions): Promise<ReadSummary> {
  const { limits, image } = options;
  requireArg(Number.isInteger(image.size) && image.size >= 1, 'image.size', 'an integer ≥ 1', image.size);
  requireArg(Number.isInteger(image.thumbnailSize) && image.thumbnailSize >= 1, 'image.thumbnailSize', 'an integer ≥ 1', image.thumbnailSize);
  requireArg(limits.maxImagePixels >= 1, 'limits.maxImagePixels', '≥ 1', limits.maxImagePixels);
  checkCols(imageFeatureCount(image), limits);
  await checkFileSize(path, limits);
  const manifest = await scan(walk, path, options);
  return decodeImages(walk, path, sink, options, manifest);
}

/** Pass one: structure checks and the manifest. */
async function scan(walk: ArchiveWalker, path: string, options: ReadOptions): Promise<Map<string, string | null> | null> {
  const check = entryChecker(options);
  let manifest: Map<string, string | null> | null = null;
  for await (const entry of walk(path, { limits: options.limits, budget: new ByteBudget(options.limits.maxUncompressedBytes) })) {
    if (check(entry) !== MANIFEST_NAME) continue;
    if (manifest !== null) throw new CairnError('ARCHIVE_BAD_MANIFEST', `The archive holds ${MANIFEST_NAME} twice.`, { entry: MANIFEST_NAME });
    manifest = parseManifest(await readEntry(entry, MANIFEST_NAME, options, false));
  }
  return manifest;
}

/** Pass two: decode images into the sink. */
async function decodeImages(
  walk: ArchiveWalker,
  path: string,
  sink: DatasetSink,
  options: ReadOptions,
  manifest: Map<string, string | null> | null,
): Promise<ReadSummary> {
  const { limits, image } = options;
  const batch = new ImageBatch(sink, options, imageFeatureCount(image));
  const check = entryChecker(options);
  const wantThumbnail = typeof sink.writeThumbnail === 'function';
  let skippedImages = 0;
  for await (const entry of walk(path, { limits, budget: new ByteBudget(limits.maxUncompressedBytes) })) {
    const id = check(entry);
    batch.bytesRead = entry.fileOffset;
    if (id === null || id === MANIFEST_NAME) continue;
    const bytes = await readEntry(entry, id, options, true);
    if (bytes === null) continue;
    let decoded;
    try {
      decoded = await decodeImage(bytes, id, image, limits.maxImagePixels, wantThumbnail);
    } catch (err) {
      if (err instanceof CairnError && err.code === 'IMAGE_UNDECODABLE' && image.onBadImage === 'skip') {
        skippedImages++;
        continue;
      }
      throw err;
    }
    const label = manifest !== null ? (manifest.get(id) ?? null) : parentFolderName(id);
    await batch.add(decoded.features, id, label, decoded.thumbnail);
  }
  await batch.finish(skippedImages);
  return { rows: batch.count, cols: imageFeatureCount(image), droppedNonFinite: 0, skippedImages, hasLabels: batch.hasLabels };
}

/** Returns a function that checks each entry in turn and gives its id, or null for folders. */
function entryChecker(options: ReadOptions): (entry: ArchiveEntry) => string | null {
  const { limits, signal } = options;
  let count = 0;
  let declared = 0;
  return (entry) => {
    throwIfAborted(signal);
    if (++count > limits.maxEntries) {
      throw new CairnError('ARCHIVE_TOO_MANY_ENTRIES', undefined, { maxEntries: limits.maxEntries });
    }
    const id = normalizeEntryPath(entry.name);
    if (entry.kind === 'unsafe') throw new CairnError('ARCHIVE_UNSAFE_ENTRY', undefined, { entry: id, reason: entry.reason });
    if (entry.kind === 'unsupported') throw new CairnError('ARCHIVE_UNSUPPORTED_ENTRY', undefined, { entry: id, reason: entry.reason });
    if (entry.kind === 'directory') return null;
    checkEntrySize(id, entry.declaredSize, limits);
    // Headers are only an early warning here; the walkers also count the bytes that really flow.
    declared += entry.declaredSize;
    if (declared > limits.maxUncompressedBytes) {
      throw new CairnError('ARCHIVE_TOO_LARGE', undefined, { limit: 'maxUncompressedBytes', maxUncompressedBytes: limits.maxUncompressedBytes });
    }
    return id;
  };
}

/**
 * Reads a whole entry, capped at maxEntryBytes. With `imagesOnly`, stops after the first bytes
 * and returns null when the entry is not an image, so other files are never buffered.
 */
async function readEntry(entry: ArchiveEntry, id: string, options: ReadOptions, imagesOnly: false): Promise<Buffer>;
async function readEntry(entry: ArchiveEntry, id: string, options: ReadOptions, imagesOnly: true): Promise<Buffer | null>;
async function readEntry(entry: ArchiveEntry, id: string, options: ReadOptions, imagesOnly: boolean): Promise<Buffer | null> {
  const parts: Buffer[] = [];
  let bytes = 0;
  let sniffed = !imagesOnly;
  const byName = imageKindFromExtension(entryExtension(id)) !== null;
  for await (const chunk of entry.chunks()) {
    bytes += chunk.length;
    checkEntrySize(id, bytes, options.limits);
    parts.push(chunk);
    if (!sniffed && bytes >= SNIFF_BYTES) {
      if (!byName && sniffImageKind(Buffer.concat(parts)) === null) return null;
      sniffed = true;
    }
  }
  const all = Buffer.concat(parts);
  if (!sniffed && !byName && sniffImageKind(all) === null) return null;
  return all;
}

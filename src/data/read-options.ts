import type { ImageOptions, ReaderLimits, ReadOptions } from './reader.js';

const GiB = 1024 ** 3;
const MiB = 1024 ** 2;

/** Limits applied when the caller names none. Each guards memory, disk or time on a 24 GiB, 2-core host. */
export const DEFAULT_LIMITS: Readonly<ReaderLimits> = Object.freeze({
  /** 8 GiB: the largest upload the service accepts; also bounds what a reader may stream. */
  maxFileBytes: 8 * GiB,
  /** 50 M rows: the id set and items.jsonl stay within a few GiB at this size. */
  maxRows: 50_000_000,
  /** 65,536 columns: one row stays ≤ 256 KiB of float32, so a batch always fits in memory. */
  maxCols: 65_536,
  /** 1 M archive entries: bounds the archive readers' first pass. */
  maxEntries: 1_000_000,
  /** 16 GiB expanded in all: stops zip / gzip bombs. */
  maxUncompressedBytes: 16 * GiB,
  /** 64 MiB per archive entry, uncompressed: one image file is decoded in memory. */
  maxEntryBytes: 64 * MiB,
  /** 40 M pixels (e.g. 8000 × 5000): sharp's decode buffer stays ≤ 160 MiB RGBA. */
  maxImagePixels: 40_000_000,
});

/** Image handling when the caller names none. */
export const DEFAULT_IMAGE_OPTIONS: Readonly<ImageOptions> = Object.freeze({
  /** 32 px squares: 1,024 gray or 3,072 RGB features, enough for coverage of visual variety. */
  size: 32,
  /** 'rgb': colour usually separates photos better than brightness alone. */
  color: 'rgb',
  /** 'cover': crops rather than pads, so borders do not dominate the features. */
  fit: 'cover',
  /** 'skip': one corrupt file in a large archive should not fail the dataset; skips are counted. */
  onBadImage: 'skip',
  /** 128 px thumbnails for contact sheets. */
  thumbnailSize: 128,
});

export type ReadOptionOverrides = Partial<Omit<ReadOptions, 'limits' | 'image'>> & {
  limits?: Partial<ReaderLimits>;
  image?: Partial<ImageOptions>;
};

/**
 * Complete read options from partial ones. Besides the limits and image defaults above:
 * nonFinite 'fail' (silently losing rows is worse than an error naming the row), scaleUint8 true
 * (uint8 .npy data becomes 0..1, like pixel data read from images), and no id / label / vector field
 * names (each reader then looks for `id`, `label` and `vector` — see the readers).
 */
export function defaultReadOptions(overrides: ReadOptionOverrides = {}): ReadOptions {
  const { limits, image, ...rest } = overrides;
  return {
    ...rest,
    nonFinite: rest.nonFinite ?? 'fail',
    scaleUint8: rest.scaleUint8 ?? true,
    limits: { ...DEFAULT_LIMITS, ...defined(limits) },
    image: { ...DEFAULT_IMAGE_OPTIONS, ...defined(image) },
  };
}

/** Drops keys set to undefined, so `{ maxRows: undefined }` keeps the default instead of erasing it. */
function defined<T extends object>(value: T | undefined): Partial<T> {
  if (!value) return {};
  return Object.fromEntries(Object.entries(value).filter(([, v]) => v !== undefined)) as Partial<T>;
}

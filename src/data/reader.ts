/**
 * One interface for every dataset format. A reader streams a file on disk into a `DatasetSink`
 * (the dataset store's writer) and never holds the whole file in memory. Readers throw
 * `CairnError`s with catalogued codes for bad input and check every limit while streaming.
 * Every reader passes test/data/reader-conformance.test.ts.
 */
export type DatasetFormat = 'npy' | 'csv' | 'tsv' | 'jsonl' | 'parquet' | 'zip' | 'tar';

export interface ReaderLimits {
  /** Largest input file in bytes. */
  maxFileBytes: number;
  /** Most rows (items) in a dataset. */
  maxRows: number;
  /** Most columns (dimensions) per item. */
  maxCols: number;
  /** Most entries in an archive (files, folders and others). */
  maxEntries: number;
  /** Most bytes an archive may expand to, in all. */
  maxUncompressedBytes: number;
  /** Largest single archive entry, uncompressed. */
  maxEntryBytes: number;
  /** Most pixels (width × height) of one image, checked from its header before decoding. */
  maxImagePixels: number;
}

export interface ImageOptions {
  /** Side length in pixels of the square each image is resized to. */
  size: number;
  /** 'gray' gives size² features per item, 'rgb' 3·size². */
  color: 'gray' | 'rgb';
  /** How an image is fitted into the square: 'cover' crops, 'contain' pads, 'fill' stretches. */
  fit: 'cover' | 'contain' | 'fill';
  /** What to do with an image that cannot be decoded: skip it and count it, or fail the dataset. */
  onBadImage: 'skip' | 'fail';
  /** Side length of the thumbnail PNG kept per item for contact sheets. */
  thumbnailSize: number;
}

export interface ReadOptions {
  limits: ReaderLimits;
  /** Rows with NaN or ±Infinity: fail with NON_FINITE_VALUE naming the row, or drop and count them. */
  nonFinite: 'fail' | 'drop';
  /** Column / field holding the item id (CSV, JSON Lines, Parquet). Missing → ids are row numbers. */
  idField?: string;
  /** Column / field holding an optional label. */
  labelField?: string;
  /** JSON Lines / Parquet field holding the vector. */
  vectorField?: string;
  /** .npy uint8 arrays: divide by 255 (true) or keep 0..255 (false). */
  scaleUint8: boolean;
  image: ImageOptions;
  /** Called now and then with the bytes consumed and rows written so far. */
  onProgress?: (progress: { bytesRead: number; rows: number }) => void;
  signal?: AbortSignal;
}

/** Where a reader writes rows. The store's writer implements it; tests use an in-memory one. */
export interface DatasetSink {
  /** Called once, before the first row, when the number of columns is known. */
  begin(cols: number): Promise<void>;
  /** Appends `count` rows (row-major float32, count × cols) with their ids and labels (null: none). */
  writeRows(data: Float32Array, count: number, ids: readonly string[], labels: readonly (string | null)[]): Promise<void>;
  /** Stores a thumbnail (PNG bytes) for the row with the given 0-based index. Image readers only. */
  writeThumbnail?(row: number, png: Buffer): Promise<void>;
}

export interface ReadSummary {
  rows: number;
  cols: number;
  /** Rows dropped for NaN/Infinity when nonFinite = 'drop'. */
  droppedNonFinite: number;
  /** Images skipped as undecodable when onBadImage = 'skip'. */
  skippedImages: number;
  /** True when the labels came from the data (a column, folder names or a manifest). */
  hasLabels: boolean;
}

export interface DatasetReader {
  readonly format: DatasetFormat;
  read(path: string, sink: DatasetSink, options: ReadOptions): Promise<ReadSummary>;
}

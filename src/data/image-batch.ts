import { CairnError } from '../errors.js';
import type { DatasetSink, ReadOptions } from './reader.js';
import { RowBatcher } from './row-batcher.js';

/** Pending thumbnails are flushed (with their rows) once they hold this many bytes. */
const THUMBNAIL_BATCH_BYTES = 8 * 1024 * 1024;

/**
 * Decoded images on their way to the sink: rows go through the vector readers' RowBatcher
 * (batching, maxRows / maxCols, progress, cancellation); thumbnails are handed to the sink after
 * the rows they belong to, so the sink never sees a thumbnail for a row it does not have.
 * `sink.begin(cols)` is called with the first image, so an archive without images never opens
 * the dataset.
 */
export class ImageBatch {
  private readonly rows: RowBatcher;
  private thumbnails: { row: number; png: Buffer }[] = [];
  private thumbnailBytes = 0;
  private anyLabel = false;

  constructor(
    private readonly sink: DatasetSink,
    options: ReadOptions,
    private readonly cols: number,
  ) {
    this.rows = new RowBatcher(sink, options);
  }

  /** Rows added so far. */
  get count(): number {
    return this.rows.rows;
  }

  /** True once a row with a non-null label has been added. */
  get hasLabels(): boolean {
    return this.anyLabel;
  }

  /** Bytes of the archive consumed so far, for progress reports. */
  set bytesRead(bytes: number) {
    this.rows.bytesRead = bytes;
  }

  async add(features: Float32Array, id: string, label: string | null, thumbnail: Buffer | null): Promise<void> {
    if (!this.rows.started) await this.rows.begin(this.cols);
    const row = this.rows.rows;
    this.rows.slot().set(features);
    const full = this.rows.commit(id, label);
    if (label !== null) this.anyLabel = true;
    if (thumbnail !== null) {
      this.thumbnails.push({ row, png: thumbnail });
      this.thumbnailBytes += thumbnail.length;
    }
    if (full || this.thumbnailBytes >= THUMBNAIL_BATCH_BYTES) await this.flush();
  }

  /** Writes everything pending. DATASET_EMPTY (with the skip count) when no image was added. */
  async finish(skippedImages: number): Promise<void> {
    await this.flush();
    if (this.rows.rows === 0) {
      const message = skippedImages > 0 ? `None of the ${skippedImages} images could be decoded.` : 'The archive contains no PNG or JPEG images.';
      throw new CairnError('DATASET_EMPTY', message, { skippedImages });
    }
  }

  private async flush(): Promise<void> {
    await this.rows.flush();
    const thumbnails = this.thumbnails;
    this.thumbnails = [];
    this.thumbnailBytes = 0;
    if (!this.sink.writeThumbnail) return;
    for (const { row, png } of thumbnails) await this.sink.writeThumbnail(row, png);
  }
}

import { CairnError } from '../errors.js';
import { checkCols, checkRows, throwIfAborted } from './reader-limits.js';
import type { DatasetSink, ReadOptions } from './reader.js';

/** Target size of one batch handed to the sink: large enough for few writes, small enough to not matter for RSS. */
const BATCH_BYTES = 4 * 1024 * 1024;

/** Where a record came from, added to error details (text formats know the line). */
export interface RecordPlace {
  line?: number;
}

/**
 * The part every vector reader shares: rows are filled into a reusable float32 batch, checked for
 * NaN / ±Infinity after the conversion to float32 (so a float64 beyond float32 range counts too),
 * dropped or rejected per `nonFinite`, counted against maxRows, given default ids (the 0-based
 * source row) and handed to the sink in batches. Progress and cancellation are checked per batch.
 *
 * Usage: `const v = b.slot(); fill v; if (b.commit(id, label)) await b.flush();`
 * The sink must not keep the batch array after writeRows resolves: it is reused.
 */
export class RowBatcher {
  cols = 0;
  /** Rows kept so far. */
  rows = 0;
  /** Records seen so far, kept or dropped: the next record's `row`. */
  sourceRows = 0;
  droppedNonFinite = 0;
  /** Set by the reader; reported through onProgress. */
  bytesRead = 0;
  private batch = new Float32Array(0);
  /** Rows the batch holds now: starts small and doubles up to maxBatchRows, so small inputs stay cheap. */
  private batchRows = 0;
  private maxBatchRows = 0;
  private count = 0;
  private ids: string[] = [];
  private labels: (string | null)[] = [];

  constructor(
    private readonly sink: DatasetSink,
    private readonly options: ReadOptions,
  ) {}

  get started(): boolean {
    return this.cols > 0;
  }

  async begin(cols: number): Promise<void> {
    if (!(cols >= 1)) throw new CairnError('DATASET_NO_FEATURES');
    checkCols(cols, this.options.limits);
    this.cols = cols;
    this.maxBatchRows = Math.max(1, Math.floor(BATCH_BYTES / (cols * 4)));
    this.batchRows = Math.min(this.maxBatchRows, 64);
    this.batch = new Float32Array(this.batchRows * cols);
    await this.sink.begin(cols);
  }

  /** The float32 slot of the next row; valid until the next commit. */
  slot(): Float32Array {
    const start = this.count * this.cols;
    return this.batch.subarray(start, start + this.cols);
  }

  /** Commits the slot's row. Returns true when the batch is full: the caller must then await flush(). */
  commit(id: string | null, label: string | null, place?: RecordPlace): boolean {
    const row = this.sourceRows++;
    const start = this.count * this.cols;
    const end = start + this.cols;
    const batch = this.batch;
    for (let i = start; i < end; i++) {
      const v = batch[i];
      // v - v is NaN exactly for NaN and ±Infinity.
      if (v - v !== 0) {
        if (this.options.nonFinite === 'drop') {
          this.droppedNonFinite++;
          return false;
        }
        throw nonFiniteValue(row, i - start, place);
      }
    }
    checkRows(this.rows + 1, this.options.limits);
    this.ids.push(id ?? String(row));
    this.labels.push(label);
    this.count++;
    this.rows++;
    return this.count === this.batchRows;
  }

  async flush(): Promise<void> {
    throwIfAborted(this.options.signal);
    if (this.count === 0) return;
    const { ids, labels, count } = this;
    this.ids = [];
    this.labels = [];
    this.count = 0;
    await this.sink.writeRows(this.batch.subarray(0, count * this.cols), count, ids, labels);
    if (count === this.batchRows && this.batchRows < this.maxBatchRows) {
      this.batchRows = Math.min(this.maxBatchRows, this.batchRows * 2);
      this.batch = new Float32Array(this.batchRows * this.cols);
    }
    this.options.onProgress?.({ bytesRead: this.bytesRead, rows: this.rows });
  }

  /** Flushes the last batch; an input without kept rows is DATASET_EMPTY. */
  async finish(): Promise<void> {
    await this.flush();
    if (this.rows === 0) {
      throw new CairnError(
        'DATASET_EMPTY',
        this.droppedNonFinite > 0 ? `Every row (${this.droppedNonFinite}) had NaN or infinite values and was dropped.` : undefined,
        { droppedNonFinite: this.droppedNonFinite },
      );
    }
  }
}

/** The error for a NaN or ±Infinity at a source row and feature (0-based); shared with openNpyRows. */
export function nonFiniteValue(row: number, feature: number, place?: RecordPlace): CairnError {
  return new CairnError('NON_FINITE_VALUE', `Row ${row} has a NaN or infinite value in feature ${feature}.`, { row, feature, ...place });
}

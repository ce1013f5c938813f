/**
 * The one error catalogue. Every error cairn can report has a stable string code, an HTTP status
 * (used by the API) and a default message. Codes never change meaning once released; add new ones.
 *
 * Errors for bad input are `CairnError`s carrying one of these codes. Numerical trouble (a solver
 * that did not converge, a degenerate case) is reported in results, not thrown.
 */
export const ERROR_CATALOGUE = {
  // --- arguments and options ---
  INVALID_ARGUMENT: { status: 400, message: 'An argument is outside its allowed range.' },
  K_TOO_LARGE: { status: 422, message: 'k is larger than the number of items in the dataset.' },
  DIMENSION_MISMATCH: { status: 422, message: 'Arrays passed together do not have matching dimensions.' },
  SELECTION_CANCELLED: { status: 409, message: 'The selection was cancelled.' },
  // --- datasets (readers) ---
  DATASET_EMPTY: { status: 422, message: 'The dataset has no rows.' },
  NPY_BAD_MAGIC: { status: 422, message: 'The file does not start with the .npy magic string.' },
  NPY_BAD_HEADER: { status: 422, message: 'The .npy header cannot be parsed.' },
  NPY_UNSUPPORTED_DTYPE: { status: 422, message: 'The .npy dtype is not supported.' },
  NPY_FORTRAN_ORDER: { status: 422, message: 'Fortran-ordered .npy arrays are not supported; save in C order.' },
  NPY_BAD_SHAPE: { status: 422, message: 'The .npy array must be 2-D with at least one column.' },
  NPY_TRUNCATED: { status: 422, message: 'The .npy file is shorter than its header says.' },
  NPY_TRAILING_DATA: { status: 422, message: 'The .npy file is longer than its header says.' },
  NON_FINITE_VALUE: { status: 422, message: 'The dataset contains NaN or infinite values (or values beyond float32 range).' },
  // Vector readers and the dataset store. In details, `row` is the 0-based index of a record among
  // the source's data records (the default id), `line` the 1-based line of a text file.
  DATASET_TOO_LARGE: { status: 413, message: 'The file is larger than the limit allows.' },
  DATASET_TOO_MANY_ROWS: { status: 413, message: 'The dataset has more rows than the limit allows.' },
  DATASET_TOO_MANY_COLUMNS: { status: 413, message: 'The dataset has more columns than the limit allows.' },
  DATASET_RECORD_TOO_LARGE: { status: 413, message: 'A single record (line or row) of the file is too large.' },
  DATASET_NO_FEATURES: { status: 422, message: 'The dataset has no feature columns.' },
  DATASET_DUPLICATE_ID: { status: 422, message: 'Two rows have the same id.' },
  DATASET_BAD_ID: { status: 422, message: 'An item id is empty or too long.' },
  DATASET_SOURCE_UNREADABLE: { status: 422, message: 'The source file cannot be read.' },
  DATASET_INGEST_CANCELLED: { status: 499, message: 'The ingestion was cancelled.' },
  DATASET_NOT_FOUND: { status: 404, message: 'No stored dataset has this id.' },
  DATASET_ALREADY_EXISTS: { status: 409, message: 'A stored dataset with this id already exists.' },
  DATASET_STORE_CORRUPT: { status: 500, message: 'A stored dataset is damaged (its files do not match its meta.json).' },
  CSV_MISSING_HEADER: { status: 422, message: 'The CSV has no header row (its first row is all numbers).' },
  CSV_DUPLICATE_COLUMN: { status: 422, message: 'Two CSV columns have the same name.' },
  CSV_UNKNOWN_COLUMN: { status: 422, message: 'A column named in the options is not in the CSV header.' },
  CSV_RAGGED_ROW: { status: 422, message: 'A CSV row has a different number of cells than the header.' },
  CSV_NON_NUMERIC: { status: 422, message: 'A CSV feature cell is not a number.' },
  CSV_MALFORMED: { status: 422, message: 'The CSV cannot be parsed (bad quoting).' },
  JSONL_BAD_LINE: { status: 422, message: 'A JSON Lines line is not a JSON object.' },
  JSONL_MISSING_VECTOR: { status: 422, message: 'A JSON Lines record has no vector field.' },
  JSONL_BAD_VECTOR: { status: 422, message: 'A JSON Lines vector is not an array of numbers.' },
  JSONL_RAGGED_VECTOR: { status: 422, message: 'A JSON Lines vector has a different length than the first one.' },
  JSONL_BAD_FIELD: { status: 422, message: 'A JSON Lines id or label field is missing or has the wrong type.' },
  PARQUET_BAD_FILE: { status: 422, message: 'The Parquet file is damaged or uses a feature that is not supported.' },
  PARQUET_UNKNOWN_COLUMN: { status: 422, message: 'A column named in the options is not in the Parquet schema.' },
  PARQUET_NO_VECTOR: { status: 422, message: 'No single numeric list column or set of float columns holds the vectors.' },
  PARQUET_RAGGED_VECTOR: { status: 422, message: 'A Parquet vector has a different length than the first one.' },
  PARQUET_NULL_VALUE: { status: 422, message: 'A Parquet id or vector is null.' },
  UNSUPPORTED_FORMAT: { status: 415, message: 'The file format is not recognised.' },
  ARCHIVE_CORRUPT: { status: 422, message: 'The archive is damaged or is not a zip / tar archive.' },
  ARCHIVE_TOO_LARGE: { status: 413, message: 'The archive expands to more bytes than the limit allows.' },
  ARCHIVE_TOO_MANY_ENTRIES: { status: 413, message: 'The archive has more entries than the limit allows.' },
  ARCHIVE_ENTRY_TOO_LARGE: { status: 413, message: 'An archive entry is larger than the limit allows.' },
  ARCHIVE_UNSAFE_PATH: { status: 422, message: 'An archive entry has an absolute path or a path leaving the archive.' },
  ARCHIVE_UNSAFE_ENTRY: { status: 422, message: 'The archive contains a link, device or other non-regular entry.' },
  ARCHIVE_UNSUPPORTED_ENTRY: { status: 422, message: 'An archive entry is encrypted or uses an unsupported compression method.' },
  ARCHIVE_BAD_MANIFEST: { status: 422, message: 'The labels.csv manifest in the archive cannot be used.' },
  IMAGE_TOO_MANY_PIXELS: { status: 413, message: 'An image has more pixels than the limit allows.' },
  IMAGE_UNDECODABLE: { status: 422, message: 'An image cannot be decoded.' },
  // --- service ---
  UNAUTHORIZED: { status: 401, message: 'A valid API key is required (Authorization: Bearer <key>).' },
  RATE_LIMITED: { status: 429, message: 'Too many requests; retry after the time in the Retry-After header.' },
  ROUTE_NOT_FOUND: { status: 404, message: 'No such route.' },
  UNSUPPORTED_MEDIA_TYPE: { status: 415, message: 'The request body has a content type this route does not accept.' },
  REQUEST_TOO_LARGE: { status: 413, message: 'The request body is larger than this route accepts.' },
  UPLOAD_NO_FILE: { status: 400, message: 'The multipart request has no file part named "file".' },
  IDEMPOTENCY_KEY_REUSED: { status: 422, message: 'This Idempotency-Key was used before for a different request.' },
  JOB_NOT_FOUND: { status: 404, message: 'No selection job has this id.' },
  JOB_NOT_COMPLETED: { status: 409, message: 'The job has not completed, so it has no result yet (see its status).' },
  JOB_FINISHED: { status: 409, message: 'The job has already finished and cannot be cancelled.' },
  DATASET_NOT_READY: { status: 409, message: 'The dataset is not ingested (it is queued, running or failed; see its status).' },
  DATASET_IN_USE: { status: 409, message: 'Selection jobs still queued or running use this dataset; cancel them first.' },
  ITEM_NOT_FOUND: { status: 422, message: 'An item id the job names (a fixed item) is not in its dataset.' },
  DATASET_HAS_NO_IMAGES: { status: 409, message: 'The dataset has no images, so there is no contact sheet.' },
  SERVICE_SHUTTING_DOWN: { status: 503, message: 'The service is shutting down; retry shortly.' },
  INTERNAL_ERROR: { status: 500, message: 'An internal error occurred; it has been logged.' },
  // --- embedding models ---
  MODEL_NOT_FOUND: { status: 404, message: 'No model with this name is in the models directory.' },
  MODEL_INVALID: { status: 422, message: 'The model failed validation at start-up; GET /v1/models shows why.' },
  MODEL_BAD_DESCRIPTION: { status: 422, message: 'The model description is not valid JSON or does not match the description schema.' },
  MODEL_FILE_MISSING: { status: 422, message: 'The .onnx file named by the model description does not exist.' },
  MODEL_LOAD_FAILED: { status: 422, message: 'onnxruntime cannot load the model file, or the model fails on a probe batch.' },
  MODEL_INPUT_MISMATCH: { status: 422, message: 'The model input does not match its description (name, type, rank, channels or size).' },
  MODEL_OUTPUT_MISSING: { status: 422, message: 'The model has no output with the name its description gives.' },
  MODEL_OUTPUT_NOT_FLOAT: { status: 422, message: 'The model output named in its description is not a float32 tensor.' },
  MODEL_OUTPUT_DIM_MISMATCH: { status: 422, message: 'The pooled model output does not have the vector length its description gives.' },
  EMBEDDING_NON_FINITE: { status: 422, message: 'The model produced NaN or infinite values for an image.' },
  DATASET_NOT_IMAGES: { status: 409, message: 'Embedding needs an image dataset with stored thumbnails.' },
  // --- compute ---
  COMPUTE_BACKEND_FAILED: { status: 500, message: 'A compute kernel failed to run.' },
} as const satisfies Record<string, { status: number; message: string }>;

export type ErrorCode = keyof typeof ERROR_CATALOGUE;

export class CairnError extends Error {
  readonly code: ErrorCode;
  readonly status: number;
  readonly details: Record<string, unknown>;

  constructor(code: ErrorCode, message?: string, details: Record<string, unknown> = {}, options?: { cause?: unknown }) {
    super(message ?? ERROR_CATALOGUE[code].message, options);
    this.name = 'CairnError';
    this.code = code;
    this.status = ERROR_CATALOGUE[code].status;
    this.details = details;
  }

  toJSON(): { error: { code: ErrorCode; message: string; details: Record<string, unknown> } } {
    return { error: { code: this.code, message: this.message, details: this.details } };
  }
}

/** Throws INVALID_ARGUMENT naming the option and its allowed range when `ok` is false. */
export function requireArg(ok: boolean, name: string, allowed: string, value?: unknown): asserts ok {
  if (!ok) {
    throw new CairnError('INVALID_ARGUMENT', `${name} must be ${allowed} (got ${JSON.stringify(value)}).`, {
      name,
      allowed,
      value,
    });
  }
}

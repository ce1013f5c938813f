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
  K_TOO_LARGE: { status: 422, message: 'k is larger than the number of distinct items in the dataset.' },
  DIMENSION_MISMATCH: { status: 422, message: 'Arrays passed together do not have matching dimensions.' },
  // --- datasets (readers) ---
  DATASET_EMPTY: { status: 422, message: 'The dataset has no rows.' },
  NPY_BAD_MAGIC: { status: 422, message: 'The file does not start with the .npy magic string.' },
  NPY_BAD_HEADER: { status: 422, message: 'The .npy header cannot be parsed.' },
  NPY_UNSUPPORTED_DTYPE: { status: 422, message: 'The .npy dtype is not supported.' },
  NPY_FORTRAN_ORDER: { status: 422, message: 'Fortran-ordered .npy arrays are not supported; save in C order.' },
  NPY_BAD_SHAPE: { status: 422, message: 'The .npy array must be 2-D with at least one column.' },
  NPY_TRUNCATED: { status: 422, message: 'The .npy file is shorter than its header says.' },
  NON_FINITE_VALUE: { status: 422, message: 'The dataset contains NaN or infinite values.' },
  UNSUPPORTED_FORMAT: { status: 415, message: 'The file format is not recognised.' },
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

import { CairnError } from '../errors.js';
import type { DatasetFormat, DatasetReader } from './reader.js';

/**
 * Each format's module and export. Imported on demand, so a format's dependencies load only when
 * it is used, and so the archive readers (written separately) may be absent: their formats then
 * report UNSUPPORTED_FORMAT instead of breaking the build.
 */
const MODULES: Record<DatasetFormat, { module: string; exportName: string }> = {
  npy: { module: './npy-reader.js', exportName: 'npyReader' },
  csv: { module: './csv-reader.js', exportName: 'csvReader' },
  tsv: { module: './csv-reader.js', exportName: 'tsvReader' },
  jsonl: { module: './jsonl-reader.js', exportName: 'jsonlReader' },
  parquet: { module: './parquet-reader.js', exportName: 'parquetReader' },
  zip: { module: './zip-reader.js', exportName: 'zipReader' },
  tar: { module: './tar-reader.js', exportName: 'tarReader' },
};

export const DATASET_FORMATS = Object.keys(MODULES) as DatasetFormat[];

export function isDatasetFormat(value: unknown): value is DatasetFormat {
  return typeof value === 'string' && Object.hasOwn(MODULES, value);
}

/** The reader for a format; UNSUPPORTED_FORMAT when its module is not there. */
export async function loadReader(format: DatasetFormat): Promise<DatasetReader> {
  const entry = isDatasetFormat(format) ? MODULES[format] : undefined;
  if (!entry) throw new CairnError('UNSUPPORTED_FORMAT', `Unknown format ${JSON.stringify(format)}.`, { format });
  let mod: Record<string, unknown>;
  try {
    // A variable specifier keeps TypeScript from requiring modules that may not exist yet.
    const specifier: string = entry.module;
    mod = (await import(specifier)) as Record<string, unknown>;
  } catch (err) {
    if (!isModuleNotFound(err)) throw err;
    throw new CairnError('UNSUPPORTED_FORMAT', `No reader for ${format} files is installed.`, { format }, { cause: err });
  }
  const reader = mod[entry.exportName] as DatasetReader | undefined;
  if (!reader || typeof reader.read !== 'function') {
    throw new CairnError('UNSUPPORTED_FORMAT', `No reader for ${format} files is installed.`, { format });
  }
  return reader;
}

function isModuleNotFound(err: unknown): boolean {
  const code = (err as { code?: unknown } | null)?.code;
  const message = err instanceof Error ? err.message : '';
  // Node says ERR_MODULE_NOT_FOUND; vitest's module runner says "Cannot find module" / "Failed to load url".
  return code === 'ERR_MODULE_NOT_FOUND' || /Cannot find module|Failed to load url/.test(message);
}

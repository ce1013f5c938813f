import { open, readdir, stat } from 'node:fs/promises';
import { basename, join, resolve, sep } from 'node:path';
import * as ort from 'onnxruntime-node';
import type { Logger } from 'pino';
import { CairnError, type ErrorCode } from '../errors.js';
import { batchTensor } from './image-tensor.js';
import { channelCount, imageTensorLength, parseModelDescription, type ModelDescription } from './model-description.js';
import { BatchFailure, runBatch, sessionOptions, sha256File } from './model-session.js';
import { firstNonFinite } from './output-vectors.js';

/**
 * The models a service can embed with: every `<name>.json` description in the models directory,
 * validated once at start-up. A model that fails validation is kept in the list with the reason
 * (so GET /v1/models shows an operator what is wrong) and never stops the service.
 */

export type ModelStatus = 'ready' | 'invalid';

/** One model as GET /v1/models lists it. */
export interface ModelEntry {
  name: string;
  status: ModelStatus;
  error: { code: ErrorCode; message: string } | null;
  /** With defaults filled; null when the description itself is unusable. */
  description: ModelDescription | null;
  /** Hex SHA-256 of the .onnx file; null when it was not read. */
  sha256: string | null;
}

/** A model that passed validation: what the embedder needs. */
export interface ReadyModel extends ModelEntry {
  status: 'ready';
  error: null;
  description: ModelDescription;
  sha256: string;
  /** Absolute or dir-relative path of the .onnx file; kept out of list() (no server paths in the API). */
  onnxPath: string;
  /** The model's batch size when its ONNX input fixes it (batches are padded to it), else null. */
  fixedBatch: number | null;
}

type Log = Pick<Logger, 'info' | 'warn'>;

/** Descriptions are a few hundred bytes; the cap only keeps a stray large .json from being read whole. */
const MAX_DESCRIPTION_BYTES = 1024 * 1024;
/** Images in the probe batch (a black and a mid-gray one) when the model's batch size is free. */
const PROBE_IMAGES = 2;

class Invalid extends Error {
  constructor(readonly code: ErrorCode, message: string) {
    super(message);
  }
}

export class ModelRegistry {
  private constructor(private readonly models: ReadonlyMap<string, ModelEntry | ReadyModel>) {}

  /**
   * Validates every *.json in `dir` (sorted by file name, one after another). A missing directory
   * gives an empty registry and a warning: embedding is optional.
   */
  static async load(dir: string, log: Log): Promise<ModelRegistry> {
    let files: string[];
    try {
      const entries = await readdir(dir, { withFileTypes: true });
      files = entries.filter((e) => e.isFile() && e.name.endsWith('.json')).map((e) => e.name).sort();
    } catch (err) {
      // No folder is the usual case without embedding models; anything else deserves a warning.
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') log.info({ dir }, 'no models directory; no embedding models are available');
      else log.warn({ dir, err }, 'models directory cannot be read; no embedding models are available');
      return new ModelRegistry(new Map());
    }
    const models = new Map<string, ModelEntry | ReadyModel>();
    for (const file of files) {
      const entry = await validate(dir, file);
      models.set(entry.name, entry);
      if (entry.status === 'ready') log.info({ model: entry.name, sha256: entry.sha256 }, 'embedding model ready');
      else log.warn({ model: entry.name, file, error: entry.error }, 'embedding model is invalid');
    }
    return new ModelRegistry(models);
  }

  /** Every model, ready or not, sorted by name; without server paths. */
  list(): ModelEntry[] {
    return [...this.models.values()]
      // Copies: callers serialise or show these, and must not be able to change what get() returns.
      .map(({ name, status, error, description, sha256 }) => structuredClone({ name, status, error, description, sha256 }))
      .sort((a, b) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
  }

  /** The ready model `name`; throws MODEL_NOT_FOUND, or MODEL_INVALID with the validation error. */
  get(name: string): ReadyModel {
    const entry = this.models.get(name);
    if (!entry) throw new CairnError('MODEL_NOT_FOUND', `No model named '${name}' is in the models directory.`, { model: name });
    if (entry.status !== 'ready') {
      throw new CairnError('MODEL_INVALID', `Model '${name}' failed validation: ${entry.error?.message ?? 'unknown reason'}`, { model: name, reason: entry.error });
    }
    return entry as ReadyModel;
  }
}

/** One description file → its entry; every failure becomes an invalid entry, never an exception. */
async function validate(dir: string, file: string): Promise<ModelEntry | ReadyModel> {
  // The file name is the model's name: unique by construction, and usable even when the JSON is not.
  const name = basename(file, '.json');
  let description: ModelDescription | null = null;
  let sha256: string | null = null;
  try {
    description = await readDescription(join(dir, file), name);
    const onnxPath = join(dir, description.file);
    const st = await stat(onnxPath).catch(() => null);
    if (!st?.isFile()) throw new Invalid('MODEL_FILE_MISSING', `${description.file} (named in ${file}) does not exist in the models directory.`);
    sha256 = await sha256File(onnxPath);
    const fixedBatch = await checkModel(onnxPath, description);
    return { name, status: 'ready', error: null, description, sha256, onnxPath, fixedBatch };
  } catch (err) {
    const code = err instanceof Invalid ? err.code : 'MODEL_LOAD_FAILED';
    const message = err instanceof Invalid ? err.message : String(err);
    // onnxruntime and fs messages quote the paths they were given; the list is served by the API, so
    // an absolute models directory is cut out of them (a relative one only names itself).
    const error = { code, message: message.split(resolve(dir) + sep).join('') };
    return { name, status: 'invalid', error, description, sha256 };
  }
}

async function readDescription(path: string, name: string): Promise<ModelDescription> {
  let json: unknown;
  try {
    const handle = await open(path, 'r');
    try {
      const { size } = await handle.stat();
      if (size > MAX_DESCRIPTION_BYTES) throw new Invalid('MODEL_BAD_DESCRIPTION', `The description is ${size} bytes; at most ${MAX_DESCRIPTION_BYTES} are read.`);
      json = JSON.parse(await handle.readFile('utf8'));
    } finally {
      await handle.close();
    }
  } catch (err) {
    if (err instanceof Invalid) throw err;
    throw new Invalid('MODEL_BAD_DESCRIPTION', `The description is not valid JSON: ${err instanceof Error ? err.message : String(err)}`);
  }
  const parsed = parseModelDescription(json);
  if (!parsed.ok) throw new Invalid('MODEL_BAD_DESCRIPTION', parsed.message);
  if (parsed.description.name !== name) {
    throw new Invalid('MODEL_BAD_DESCRIPTION', `name '${parsed.description.name}' must equal the file name without .json ('${name}').`);
  }
  return parsed.description;
}

/**
 * Opens the model (one intra-op thread: validation is one small batch), checks its input and
 * output against the description, runs the probe batch, and returns the fixed batch size, if any.
 */
async function checkModel(onnxPath: string, description: ModelDescription): Promise<number | null> {
  let session: ort.InferenceSession;
  try {
    session = await ort.InferenceSession.create(onnxPath, sessionOptions(1));
  } catch (err) {
    throw new Invalid('MODEL_LOAD_FAILED', `onnxruntime cannot load ${description.file}: ${err instanceof Error ? err.message : String(err)}`);
  }
  try {
    const fixedBatch = checkInput(session, description);
    checkOutput(session, description);
    await probe(session, description, fixedBatch);
    return fixedBatch;
  } finally {
    await session.release();
  }
}

/** Symbolic (string) and unknown (non-positive) dimensions accept any size. */
const fixed = (d: number | string | undefined): number | null => (typeof d === 'number' && d > 0 ? d : null);

function checkInput(session: ort.InferenceSession, { input }: ModelDescription): number | null {
  const meta = session.inputMetadata;
  const names = meta.map((m) => m.name);
  const found = meta.find((m) => m.name === input.name);
  if (!found) throw new Invalid('MODEL_INPUT_MISMATCH', `The model has no input '${input.name}'; its inputs are ${names.map((n) => `'${n}'`).join(', ')}.`);
  // The embedder feeds one tensor; a second required input would make every run fail.
  const others = names.filter((n) => n !== input.name);
  if (others.length > 0) throw new Invalid('MODEL_INPUT_MISMATCH', `The model has inputs besides '${input.name}' (${others.join(', ')}); only single-input models can be fed.`);
  if (!found.isTensor || found.type !== 'float32') {
    throw new Invalid('MODEL_INPUT_MISMATCH', `Input '${input.name}' is ${found.isTensor ? found.type : 'not a tensor'}; a float32 tensor is needed.`);
  }
  // An input without a declared shape is left to the probe run.
  if (found.shape.length === 0) return null;
  const shape = found.shape;
  const where = `Input '${input.name}' has shape [${shape.join(', ')}]`;
  if (shape.length !== 4) throw new Invalid('MODEL_INPUT_MISMATCH', `${where}; a rank-4 image batch (${input.layout}) is needed.`);
  const [c, h, w] = input.layout === 'nchw' ? [shape[1], shape[2], shape[3]] : [shape[3], shape[1], shape[2]];
  const channels = channelCount(input);
  if (fixed(c) !== null && c !== channels) throw new Invalid('MODEL_INPUT_MISMATCH', `${where}: ${c} channels (${input.layout}), but the description says ${input.channels} (${channels}).`);
  for (const side of [h, w]) {
    if (fixed(side) !== null && side !== input.size) throw new Invalid('MODEL_INPUT_MISMATCH', `${where}: its side is ${side} (${input.layout}), but the description says size ${input.size}.`);
  }
  return fixed(shape[0]);
}

function checkOutput(session: ort.InferenceSession, { output }: ModelDescription): void {
  const found = session.outputMetadata.find((m) => m.name === output.name);
  if (!found) {
    const names = session.outputMetadata.map((m) => `'${m.name}'`).join(', ');
    throw new Invalid('MODEL_OUTPUT_MISSING', `The model has no output '${output.name}'; its outputs are ${names}.`);
  }
  if (!found.isTensor || found.type !== 'float32') {
    throw new Invalid('MODEL_OUTPUT_NOT_FLOAT', `Output '${output.name}' is ${found.isTensor ? found.type : 'not a tensor'}; float32 is needed.`);
  }
}

/** One batch of a black and a mid-gray image: the output must pool to output.dim finite values. */
async function probe(session: ort.InferenceSession, description: ModelDescription, fixedBatch: number | null): Promise<void> {
  const batch = fixedBatch ?? PROBE_IMAGES;
  const length = imageTensorLength(description.input);
  const images = [new Uint8Array(length), new Uint8Array(length).fill(128)].slice(0, batch);
  let vectors: Float32Array;
  try {
    vectors = await runBatch(session, description, batchTensor(images, description.input, batch), batch);
  } catch (err) {
    if (!(err instanceof BatchFailure)) throw err;
    const code = err.kind === 'run' ? 'MODEL_LOAD_FAILED' : err.kind === 'not-float' ? 'MODEL_OUTPUT_NOT_FLOAT' : 'MODEL_OUTPUT_DIM_MISMATCH';
    throw new Invalid(code, `Probe batch: ${err.message}`);
  }
  const bad = firstNonFinite(vectors);
  if (bad >= 0) throw new Invalid('EMBEDDING_NON_FINITE', `Probe batch: the model gave ${vectors[bad]} for image ${Math.floor(bad / description.output.dim)}.`);
}

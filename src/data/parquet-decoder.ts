import { spawn, type ChildProcess } from 'node:child_process';
import { createRequire } from 'node:module';
import { pathToFileURL } from 'node:url';
import type { FileMetaData } from 'hyparquet';
import { CairnError } from '../errors.js';
import { DECODER_SOURCE } from './parquet-decoder-source.js';

/**
 * Parquet decoding runs in a child process. hyparquet is not hardened against hostile files: a
 * crafted run length in a page makes it grow a JS array past V8's limit, which aborts the whole
 * process (a fatal error, not an exception — found by test/data/reader-fuzz.test.ts), and other
 * damage can make it loop for a long time. In a child, such a file costs only that process: a
 * crash or a time-out becomes PARQUET_BAD_FILE and the next request starts a fresh child.
 * One child serves every ingestion; it is started on first use and does not keep the parent alive.
 */

/** Heap of the child: a row group's decoded rows must fit (1 M rows × 128 floats takes about 2 GiB). */
const CHILD_HEAP_MB = 6144;
/** Time allowed per request: a fixed part plus 1 s per MB of file read, far slower than real decoding. */
const BASE_TIMEOUT_MS = 5_000;

export type DecodedColumn = unknown[] | Float32Array | { values: Float32Array; lengths: Int32Array };
export interface ColumnRequest {
  name: string;
  kind: 'text' | 'list' | 'scalar';
}

interface Pending {
  resolve: (reply: Record<string, unknown>) => void;
  reject: (err: CairnError) => void;
  timer: NodeJS.Timeout;
}

let child: ChildProcess | undefined;
const pending = new Map<number, Pending>();
let nextId = 0;

function startChild(): ChildProcess {
  const require = createRequire(import.meta.url);
  const proc = spawn(process.execPath, [`--max-old-space-size=${CHILD_HEAP_MB}`, '--input-type=module', '-e', DECODER_SOURCE], {
    stdio: ['ignore', 'ignore', 'ignore', 'ipc'],
    serialization: 'advanced',
    env: {
      ...process.env,
      CAIRN_HYPARQUET_URL: pathToFileURL(require.resolve('hyparquet')).href,
      CAIRN_COMPRESSORS_URL: pathToFileURL(require.resolve('hyparquet-compressors')).href,
    },
  });
  proc.on('message', (message: { id: number; error?: { name: string; message: string } }) => {
    const entry = pending.get(message.id);
    if (!entry) return;
    pending.delete(message.id);
    clearTimeout(entry.timer);
    if (message.error) entry.reject(decoderError(message.error.message, message.error.name));
    else entry.resolve(message as Record<string, unknown>);
  });
  proc.on('exit', () => {
    if (child === proc) child = undefined;
    for (const [id, entry] of pending) {
      pending.delete(id);
      clearTimeout(entry.timer);
      entry.reject(decoderError('parquet decoder stopped (crashed or ran out of memory)'));
    }
  });
  proc.on('error', () => undefined); // 'exit' follows and rejects what is pending
  proc.unref();
  proc.channel?.unref();
  return proc;
}

/** Sends one request; a time-out kills the child (it may be stuck in a loop) and fails the request. */
function request(message: Record<string, unknown>, timeoutMs: number): Promise<Record<string, unknown>> {
  child ??= startChild();
  const proc = child;
  const id = nextId++;
  return new Promise((resolve, reject) => {
    const timer = setTimeout(() => {
      pending.delete(id);
      reject(decoderError(`parquet decoding took longer than ${Math.round(timeoutMs / 1000)} s`));
      proc.kill('SIGKILL');
    }, timeoutMs);
    pending.set(id, { resolve, reject, timer });
    proc.send({ ...message, id }, (err) => {
      if (err && pending.delete(id)) {
        clearTimeout(timer);
        reject(decoderError('parquet decoder is not reachable'));
      }
    });
  });
}

/** Messages of hyparquet's own checks name offsets and types, never cell values, so they are kept. */
const STRUCTURAL_MESSAGE = /^(parquet|thrift)/;

function decoderError(message: string, name = 'Error'): CairnError {
  const reason = STRUCTURAL_MESSAGE.test(message) ? message.slice(0, 200) : name;
  return new CairnError('PARQUET_BAD_FILE', `The Parquet file cannot be read: ${reason}.`, { reason });
}

/** One open Parquet file in the decoder. */
export class ParquetDecoderSession {
  private static sessions = 0;
  private readonly session = `${process.pid}-${ParquetDecoderSession.sessions++}`;

  constructor(
    private readonly path: string,
    private readonly size: number,
  ) {}

  async open(): Promise<FileMetaData> {
    const reply = await request({ op: 'open', session: this.session, path: this.path, size: this.size }, BASE_TIMEOUT_MS + this.size / 1000);
    return reply.metadata as FileMetaData;
  }

  /** Decodes rows rowStart..rowEnd-1 of the given columns; `bytes` (the chunks' size) scales the time-out. */
  async rows(rowStart: number, rowEnd: number, columns: ColumnRequest[], bytes: number): Promise<DecodedColumn[]> {
    const reply = await request({ op: 'rows', session: this.session, rowStart, rowEnd, columns }, BASE_TIMEOUT_MS + bytes / 1000);
    return reply.columns as DecodedColumn[];
  }

  /** Closes the file in the child without waiting for the answer (nothing depends on it). */
  close(): void {
    child?.send({ op: 'close', session: this.session, id: -1 }, () => undefined);
  }
}

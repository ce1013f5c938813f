import type { FileHandle } from 'node:fs/promises';
import { CairnError } from '../errors.js';
import { parsePythonLiteral, PyDict, PySyntaxError, PyTuple, type PyValue } from './python-literal.js';

export type NpyDtype = 'f4' | 'f8' | 'u1';

export interface NpyHeader {
  dtype: NpyDtype;
  itemSize: number;
  rows: number;
  cols: number;
  /** Byte offset of the first array element. */
  dataOffset: number;
}

const MAGIC = Buffer.from('\x93NUMPY', 'latin1');
/** numpy itself refuses headers over 10,000 bytes by default; a little headroom for other writers. */
const MAX_HEADER_BYTES = 65_536;

const DTYPES: Record<string, { dtype: NpyDtype; itemSize: number }> = {
  '<f4': { dtype: 'f4', itemSize: 4 },
  '<f8': { dtype: 'f8', itemSize: 8 },
  '|u1': { dtype: 'u1', itemSize: 1 },
  '<u1': { dtype: 'u1', itemSize: 1 },
};

/**
 * Reads and validates the header of a .npy file (format versions 1.0, 2.0 and 3.0): magic,
 * version, header length and the header dict {'descr', 'fortran_order', 'shape'}.
 */
export async function readNpyHeader(fh: FileHandle, fileSize: number): Promise<NpyHeader> {
  const prefix = Buffer.alloc(12);
  const { bytesRead } = await fh.read(prefix, 0, 12, 0);
  if (bytesRead < 8 || !prefix.subarray(0, 6).equals(MAGIC)) throw new CairnError('NPY_BAD_MAGIC');
  const major = prefix[6];
  if (major < 1 || major > 3) {
    throw new CairnError('NPY_BAD_HEADER', `Unsupported .npy format version ${major}.${prefix[7]}.`, { version: `${major}.${prefix[7]}` });
  }
  const lengthBytes = major === 1 ? 2 : 4;
  if (bytesRead < 8 + lengthBytes) throw new CairnError('NPY_TRUNCATED', 'The .npy file ends inside its header.');
  const headerLength = major === 1 ? prefix.readUInt16LE(8) : prefix.readUInt32LE(8);
  if (headerLength > MAX_HEADER_BYTES) {
    throw new CairnError('NPY_BAD_HEADER', `The .npy header is ${headerLength} bytes; at most ${MAX_HEADER_BYTES} are accepted.`);
  }
  const dataOffset = 8 + lengthBytes + headerLength;
  if (dataOffset > fileSize) throw new CairnError('NPY_TRUNCATED', 'The .npy file ends inside its header.');
  const raw = Buffer.alloc(headerLength);
  await readFully(fh, raw, 8 + lengthBytes);
  // Versions 1 and 2 are latin-1 by definition; 3 is UTF-8 (for structured field names).
  const text = raw.toString(major === 3 ? 'utf8' : 'latin1');

  const dict = parseDict(text);
  const descr = dict.get('descr');
  const fortran = dict.get('fortran_order');
  const shape = dict.get('shape');
  if (dict.size !== 3 || descr === undefined || fortran === undefined || shape === undefined) {
    throw new CairnError('NPY_BAD_HEADER', "The .npy header must have exactly the keys 'descr', 'fortran_order' and 'shape'.");
  }
  if (typeof fortran !== 'boolean') throw new CairnError('NPY_BAD_HEADER', "'fortran_order' is not True or False.");
  const dtype = parseDescr(descr);
  if (!(shape instanceof PyTuple) || !shape.items.every((n) => typeof n === 'number' && n >= 0)) {
    throw new CairnError('NPY_BAD_HEADER', "'shape' is not a tuple of non-negative integers.");
  }
  const dims = shape.items as number[];
  if (dims.length !== 2 || dims[1] < 1) {
    throw new CairnError('NPY_BAD_SHAPE', `The array has shape (${dims.join(', ')}); a 2-D (rows, columns) array is needed.`, {
      shape: dims,
    });
  }
  if (fortran) throw new CairnError('NPY_FORTRAN_ORDER');
  return { ...dtype, rows: dims[0], cols: dims[1], dataOffset };
}

function parseDict(text: string): Map<string, PyValue> {
  let value: PyValue;
  try {
    value = parsePythonLiteral(text);
  } catch (err) {
    if (err instanceof PySyntaxError) throw new CairnError('NPY_BAD_HEADER', `The .npy header is not a Python literal: ${err.message}.`);
    throw err;
  }
  if (!(value instanceof PyDict)) throw new CairnError('NPY_BAD_HEADER', 'The .npy header is not a dict.');
  return value.entries;
}

function parseDescr(descr: PyValue): { dtype: NpyDtype; itemSize: number } {
  if (Array.isArray(descr)) {
    throw new CairnError('NPY_UNSUPPORTED_DTYPE', 'Structured (record) arrays are not supported; save a plain 2-D float array.', {
      dtype: 'structured',
    });
  }
  if (typeof descr !== 'string') throw new CairnError('NPY_BAD_HEADER', "'descr' is not a string.");
  const known = DTYPES[descr];
  if (known) return known;
  const hint =
    descr[0] === '>'
      ? ' Big-endian data: save with arr.astype("<f4").'
      : descr.endsWith('O')
        ? ' Object arrays cannot be read safely.'
        : ' Supported: <f4, <f8, |u1.';
  // The dtype string is shown, length-capped: it comes from the file.
  throw new CairnError('NPY_UNSUPPORTED_DTYPE', `The dtype ${JSON.stringify(descr.slice(0, 32))} is not supported.${hint}`, {
    dtype: descr.slice(0, 32),
  });
}

/** Fills `target` from the file at `position`; NPY_TRUNCATED with `endMessage` when the file ends first. */
export async function readFully(fh: FileHandle, target: Uint8Array, position: number, endMessage = 'The .npy file ends inside its header.'): Promise<void> {
  let done = 0;
  while (done < target.length) {
    const { bytesRead } = await fh.read(target, done, target.length - done, position + done);
    if (bytesRead === 0) throw new CairnError('NPY_TRUNCATED', endMessage);
    done += bytesRead;
  }
}

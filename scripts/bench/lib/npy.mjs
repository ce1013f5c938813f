// Minimal .npy (format version 1.0) writers for a row-major float32 matrix. Written by hand rather
// than through the project's readers so the bench's input does not depend on code under test.
import { createWriteStream } from 'node:fs';
import { open, writeFile } from 'node:fs/promises';
import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';

/**
 * The '<f4' header of a rows × cols matrix. Its length is padded with spaces so that magic +
 * version + length + header is a multiple of 64 bytes and ends in '\n', as numpy itself does
 * (NEP 1), so the data section is aligned for memory-mapping readers.
 */
function npyHeader(rows, cols) {
  // Float32Array is host-endian; every platform Node 20 supports here is little-endian, but check
  // rather than silently writing a file numpy would misread.
  if (new Uint8Array(new Uint16Array([1]).buffer)[0] !== 1) throw new Error('big-endian host: .npy writer assumes little-endian');
  const dict = `{'descr': '<f4', 'fortran_order': False, 'shape': (${rows}, ${cols}), }`;
  const preamble = 6 + 2 + 2; // magic "\x93NUMPY", version 1.0, uint16 header length
  const unpadded = preamble + dict.length + 1; // + trailing '\n'
  const total = Math.ceil(unpadded / 64) * 64;
  const header = dict + ' '.repeat(total - unpadded) + '\n';
  if (header.length > 0xffff) throw new RangeError('header too long for .npy version 1.0');

  const head = Buffer.alloc(preamble + header.length);
  head[0] = 0x93;
  head.write('NUMPY', 1, 'latin1');
  head[6] = 1;
  head[7] = 0;
  head.writeUInt16LE(header.length, 8);
  head.write(header, preamble, 'latin1');
  return head;
}

const bytesOf = (a) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);

/** Writes `data` (rows × cols float32, row-major) to `path` as a little-endian '<f4' .npy. */
export async function writeNpyFloat32(path, data, rows, cols) {
  if (data.length !== rows * cols) throw new RangeError(`data has ${data.length} values, expected ${rows}×${cols}`);
  const head = npyHeader(rows, cols);
  const body = bytesOf(data);
  await writeFile(path, Buffer.concat([head, body]));
  await flushToDisk(path);
  return head.length + body.length;
}

/**
 * Waits until the file is on disk. Otherwise the kernel writes the fresh file back while the first
 * timed run reads it (at 1M × 128: cairn, the first run, was 1–4 s slower in the bench than alone).
 */
async function flushToDisk(path) {
  const fh = await open(path, 'r+');
  try {
    await fh.sync();
  } finally {
    await fh.close();
  }
}

/**
 * The same file from an iterable of Float32Array chunks of whole rows, written as they come, so
 * the whole matrix never has to be in memory at once.
 */
export async function writeNpyFloat32Chunks(path, chunks, rows, cols) {
  const head = npyHeader(rows, cols);
  let values = 0;
  function* parts() {
    yield head;
    for (const c of chunks) {
      values += c.length;
      yield bytesOf(c);
    }
  }
  await pipeline(Readable.from(parts(), { objectMode: false }), createWriteStream(path));
  await flushToDisk(path);
  if (values !== rows * cols) throw new RangeError(`chunks held ${values} values, expected ${rows}×${cols}`);
  return head.length + values * 4;
}

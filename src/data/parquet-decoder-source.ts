/**
 * The program the Parquet decoder child process runs (see parquet-decoder.ts), as ES module text
 * for `node --input-type=module -e`. It is text rather than a module of its own because the child
 * must run the same way from dist/ and from the TypeScript sources under vitest. It imports
 * hyparquet and hyparquet-compressors from the file URLs in CAIRN_HYPARQUET_URL and
 * CAIRN_COMPRESSORS_URL, and answers two requests over the IPC channel:
 *
 *   { id, op: 'open', session, path, size } → { id, metadata }  (footer parsed; file kept open)
 *   { id, op: 'rows', session, rowStart, rowEnd, columns: [{ name, kind: 'text' | 'list' | 'scalar' }] }
 *                                          → { id, columns }    (text: values as decoded;
 *                                             list: { values: Float32Array, lengths: Int32Array, -1 = null };
 *                                             scalar: Float32Array, null = NaN)
 *   { id, op: 'close', session }         → { id }
 * Failures answer { id, error: { name, message } }.
 */
export const DECODER_SOURCE = String.raw`
import { open } from 'node:fs/promises';
const { parquetMetadataAsync, parquetRead } = await import(process.env.CAIRN_HYPARQUET_URL);
const { compressors } = await import(process.env.CAIRN_COMPRESSORS_URL);

// A damaged page header must not make a decompressor allocate gigabytes.
const MAX_PAGE_BYTES = 256 * 1024 * 1024;
const guarded = {};
for (const [codec, decompress] of Object.entries(compressors)) {
  guarded[codec] = (input, length) => {
    if (!Number.isSafeInteger(length) || length < 0 || length > MAX_PAGE_BYTES) throw new Error('parquet page size ' + length + ' out of range');
    return decompress(input, length);
  };
}

const files = new Map();

function asyncBuffer(fh, size) {
  return {
    byteLength: size,
    async slice(start, end = size) {
      if (!(Number.isSafeInteger(start) && Number.isSafeInteger(end) && start >= 0 && start <= end && end <= size)) {
        throw new Error('parquet read of bytes ' + start + '..' + end + ' outside the file');
      }
      const view = new Uint8Array(end - start);
      let done = 0;
      while (done < view.length) {
        const { bytesRead } = await fh.read(view, done, view.length - done, start + done);
        if (bytesRead === 0) throw new Error('parquet file ended early');
        done += bytesRead;
      }
      return view.buffer;
    },
  };
}

function toFloat(value) {
  if (typeof value === 'number') return value;
  if (typeof value === 'bigint') return Number(value);
  if (value === null || value === undefined) return NaN;
  throw new Error('parquet vector holds a non-numeric value');
}

function packList(values) {
  const lengths = new Int32Array(values.length);
  let total = 0;
  for (let r = 0; r < values.length; r++) {
    const v = values[r];
    if (v === null || v === undefined) lengths[r] = -1;
    else if (Array.isArray(v) || ArrayBuffer.isView(v)) total += lengths[r] = v.length;
    else throw new Error('parquet vector column is not a list');
  }
  const flat = new Float32Array(total);
  let k = 0;
  for (let r = 0; r < values.length; r++) {
    const v = values[r];
    if (lengths[r] > 0) for (let j = 0; j < v.length; j++) flat[k++] = toFloat(v[j]);
  }
  return { values: flat, lengths };
}

async function handle(msg) {
  if (msg.op === 'open') {
    const fh = await open(msg.path, 'r');
    try {
      const file = asyncBuffer(fh, msg.size);
      const metadata = await parquetMetadataAsync(file);
      files.set(msg.session, { fh, file, metadata });
      return { metadata };
    } catch (err) {
      await fh.close();
      throw err;
    }
  }
  if (msg.op === 'close') {
    const entry = files.get(msg.session);
    files.delete(msg.session);
    await entry?.fh.close();
    return {};
  }
  const entry = files.get(msg.session);
  if (!entry) throw new Error('parquet file not open');
  let rows;
  await parquetRead({
    file: entry.file,
    metadata: entry.metadata,
    columns: msg.columns.map((c) => c.name),
    rowStart: msg.rowStart,
    rowEnd: msg.rowEnd,
    compressors: guarded,
    rowFormat: 'array',
    onComplete: (result) => { rows = result; },
  });
  if (!rows || rows.length !== msg.rowEnd - msg.rowStart) throw new Error('parquet row group has ' + rows?.length + ' rows, expected ' + (msg.rowEnd - msg.rowStart));
  const columns = msg.columns.map((c, i) => {
    const values = rows.map((row) => row[i]);
    if (c.kind === 'list') return packList(values);
    if (c.kind === 'scalar') return Float32Array.from(values, toFloat);
    return values;
  });
  return { columns };
}

process.on('message', (msg) => {
  handle(msg).then(
    (reply) => process.send({ id: msg.id, ...reply }),
    (err) => process.send({ id: msg.id, error: { name: err?.name ?? 'Error', message: String(err?.message ?? err) } }),
  );
});
process.on('disconnect', () => process.exit(0));
`;

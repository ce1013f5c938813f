import { createReadStream } from 'node:fs';
import { CairnError } from '../errors.js';

export interface TextLine {
  text: string;
  /** 1-based. */
  line: number;
  /** Bytes of the file consumed up to the end of this line. */
  bytesRead: number;
}

/**
 * The lines of a UTF-8 text file, streamed. Unlike readline, a line longer than `maxLineBytes`
 * fails with DATASET_RECORD_TOO_LARGE instead of being buffered whole. A trailing '\r' and a
 * leading byte-order mark are removed.
 */
export async function* readLines(path: string, maxLineBytes: number, chunkBytes = 1024 * 1024): AsyncGenerator<TextLine> {
  const input = createReadStream(path, { highWaterMark: chunkBytes });
  let pending: Buffer[] = [];
  let pendingBytes = 0;
  let line = 0;
  let consumed = 0;
  const tooLong = () =>
    new CairnError('DATASET_RECORD_TOO_LARGE', `Line ${line + 1} is longer than ${maxLineBytes} bytes.`, {
      line: line + 1,
      limit: maxLineBytes,
    });
  const decode = (parts: Buffer[]): string => {
    let text = (parts.length === 1 ? parts[0] : Buffer.concat(parts)).toString('utf8');
    if (text.endsWith('\r')) text = text.slice(0, -1);
    if (line === 1 && text.charCodeAt(0) === 0xfeff) text = text.slice(1);
    return text;
  };
  try {
    for await (const chunk of input as AsyncIterable<Buffer>) {
      let start = 0;
      for (;;) {
        const end = chunk.indexOf(10, start);
        if (end < 0) break;
        if (pendingBytes + end - start > maxLineBytes) throw tooLong();
        pending.push(chunk.subarray(start, end));
        consumed += pendingBytes + end - start + 1;
        line++;
        yield { text: decode(pending), line, bytesRead: consumed };
        pending = [];
        pendingBytes = 0;
        start = end + 1;
      }
      if (start < chunk.length) {
        pendingBytes += chunk.length - start;
        if (pendingBytes > maxLineBytes) throw tooLong();
        pending.push(chunk.subarray(start));
      }
    }
    if (pendingBytes > 0) {
      consumed += pendingBytes;
      line++;
      yield { text: decode(pending), line, bytesRead: consumed };
    }
  } finally {
    input.destroy();
  }
}

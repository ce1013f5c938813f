/**
 * Recognises PNG and JPEG bytes and reads their dimensions from the header alone, so an image
 * that claims to be enormous is refused before any decoder allocates memory for it.
 */
export type ImageKind = 'png' | 'jpeg';

const PNG_SIGNATURE = Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);

/** Bytes needed by `sniffImageKind`. */
export const SNIFF_BYTES = 8;

/** The image kind from the magic bytes at the start of a file, or null. */
export function sniffImageKind(head: Buffer): ImageKind | null {
  if (head.length >= 8 && head.subarray(0, 8).equals(PNG_SIGNATURE)) return 'png';
  if (head.length >= 3 && head[0] === 0xff && head[1] === 0xd8 && head[2] === 0xff) return 'jpeg';
  return null;
}

/** The image kind a file name promises (entries named like images but with other bytes are bad images). */
export function imageKindFromExtension(extension: string): ImageKind | null {
  if (extension === 'png') return 'png';
  if (extension === 'jpg' || extension === 'jpeg') return 'jpeg';
  return null;
}

export interface ImageSize {
  width: number;
  height: number;
}

/** Width and height from the PNG IHDR or the first JPEG SOF marker; null when the header is unreadable. */
export function readImageSize(bytes: Buffer): ImageSize | null {
  const kind = sniffImageKind(bytes);
  if (kind === 'png') return readPngSize(bytes);
  if (kind === 'jpeg') return readJpegSize(bytes);
  return null;
}

function readPngSize(bytes: Buffer): ImageSize | null {
  // The PNG spec requires IHDR to be the first chunk: length (4), type (4), width (4), height (4).
  if (bytes.length < 24 || bytes.toString('latin1', 12, 16) !== 'IHDR') return null;
  return { width: bytes.readUInt32BE(16), height: bytes.readUInt32BE(20) };
}

function readJpegSize(bytes: Buffer): ImageSize | null {
  let at = 2;
  while (at + 4 <= bytes.length) {
    if (bytes[at] !== 0xff) return null;
    const marker = bytes[at + 1];
    // 0xFF fill bytes may precede a marker.
    if (marker === 0xff) {
      at += 1;
      continue;
    }
    // Markers without a length field: TEM, RST0–7 (SOI cannot repeat; EOI before a frame is corrupt).
    if (marker === 0x01 || (marker >= 0xd0 && marker <= 0xd7)) {
      at += 2;
      continue;
    }
    if (marker === 0xd8 || marker === 0xd9 || marker === 0xda) return null;
    const length = bytes.readUInt16BE(at + 2);
    if (length < 2) return null;
    // SOF0–SOF15 except DHT (C4), JPG (C8) and DAC (CC) carry the frame size.
    if (marker >= 0xc0 && marker <= 0xcf && marker !== 0xc4 && marker !== 0xc8 && marker !== 0xcc) {
      if (at + 9 > bytes.length) return null;
      return { height: bytes.readUInt16BE(at + 5), width: bytes.readUInt16BE(at + 7) };
    }
    at += 2 + length;
  }
  return null;
}

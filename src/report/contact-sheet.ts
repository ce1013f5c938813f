import sharp, { type OverlayOptions } from 'sharp';
import { requireArg } from '../errors.js';
import { drawText, GLYPH_HEIGHT, textWidth, type RawCanvas } from './bitmap-font.js';

/**
 * A contact sheet: the representatives of a selection as one PNG grid, in the order given, each
 * with a caption `#rank  w weight` under its image.
 *
 * Layout, for n cells, C columns and cell size S (rows R = ceil(n / C); empty trailing slots stay white):
 *   width  = C·S + (C + 1)·SHEET_PADDING
 *   height = R·(S + CAPTION_HEIGHT) + (R + 1)·SHEET_PADDING
 * Cell i sits at column i mod C, row floor(i / C); its image area is the S×S square at
 *   x = SHEET_PADDING + col·(S + SHEET_PADDING),  y = SHEET_PADDING + row·(S + CAPTION_HEIGHT + SHEET_PADDING),
 * and its caption strip is the S×CAPTION_HEIGHT band right below it.
 */
export interface ContactSheetCell {
  /** A PNG thumbnail of any size, or null when the item has no image (a placeholder is drawn). */
  png: Buffer | null;
  rank: number;
  /** The representative's weight, 0..1. */
  weight: number;
}

export interface ContactSheetOptions {
  /** 1..100; default min(10, ceil(√n)). */
  columns?: number;
  /** Side of each image area in px, 16..512; default 128. */
  cellSize?: number;
}

export const SHEET_PADDING = 4;
/** 2× font height plus 3 px above and below. */
export const CAPTION_HEIGHT = 20;

const MAX_CELLS = 2000;
const MAX_COLUMNS = 100;
const MIN_CELL_SIZE = 16;
const MAX_CELL_SIZE = 512;
/**
 * The sheet is assembled in memory (3 bytes a pixel) before encoding, so its size is capped at
 * 64 Mi pixels (192 MiB). The defaults stay below it even for 2000 cells (about 41 M pixels).
 */
const MAX_SHEET_PIXELS = 64 * 1024 * 1024;
/** Thumbnails are small; a bigger "thumbnail" gets a placeholder rather than a costly decode. */
const MAX_THUMBNAIL_PIXELS = 4096 * 4096;
/** Simplex weights can overshoot 1 by a rounding error; that must not reject a sheet. */
const WEIGHT_SLACK = 1e-9;

const WHITE = [255, 255, 255] as const;
const CAPTION_INK = [34, 34, 34] as const;
const PLACEHOLDER_FILL = [224, 224, 224] as const;
const PLACEHOLDER_CROSS = [168, 168, 168] as const;
const PNG_SIGNATURE = Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);

/** The caption under a cell, e.g. `#3  w 0.084`; weights below 0.001 read `w <0.001`. */
export function contactSheetCaption(rank: number, weight: number): string {
  return `#${rank}  w ${weight < 0.001 ? '<0.001' : weight.toFixed(3)}`;
}

/**
 * Renders `cells` as a PNG grid (see the layout above). A thumbnail that cannot be decoded gets the
 * placeholder, since one damaged file must not cost the whole sheet. Throws INVALID_ARGUMENT for
 * out-of-range options or cells, or when the sheet would pass 64 Mi pixels.
 */
export async function renderContactSheet(cells: ContactSheetCell[], options: ContactSheetOptions = {}): Promise<Buffer> {
  // Only the length goes into the error: requireArg serialises the value, and cells hold buffers.
  requireArg(Array.isArray(cells) && cells.length >= 1 && cells.length <= MAX_CELLS, 'cells', `an array of 1..${MAX_CELLS} cells`, Array.isArray(cells) ? cells.length : typeof cells);
  const n = cells.length;
  const columns = options.columns ?? Math.min(10, Math.ceil(Math.sqrt(n)));
  const cellSize = options.cellSize ?? 128;
  requireArg(Number.isInteger(columns) && columns >= 1 && columns <= MAX_COLUMNS, 'columns', `an integer in 1..${MAX_COLUMNS}`, columns);
  requireArg(Number.isInteger(cellSize) && cellSize >= MIN_CELL_SIZE && cellSize <= MAX_CELL_SIZE, 'cellSize', `an integer in ${MIN_CELL_SIZE}..${MAX_CELL_SIZE}`, cellSize);
  cells.forEach((cell, i) => validateCell(cell, i));

  const rows = Math.ceil(n / columns);
  const width = columns * cellSize + (columns + 1) * SHEET_PADDING;
  const height = rows * (cellSize + CAPTION_HEIGHT) + (rows + 1) * SHEET_PADDING;
  requireArg(width * height <= MAX_SHEET_PIXELS, 'columns × cellSize', `small enough for a sheet of at most ${MAX_SHEET_PIXELS} pixels`, { width, height });

  const sheet: RawCanvas = { data: Buffer.alloc(width * height * 3, 255), width, height, channels: 3 };
  const thumbnails = await Promise.all(cells.map((cell) => (cell.png === null ? null : fitThumbnail(cell.png, cellSize))));
  const overlays: OverlayOptions[] = [];
  cells.forEach((cell, i) => {
    const x = SHEET_PADDING + (i % columns) * (cellSize + SHEET_PADDING);
    const y = SHEET_PADDING + Math.floor(i / columns) * (cellSize + CAPTION_HEIGHT + SHEET_PADDING);
    const thumbnail = thumbnails[i];
    if (thumbnail === null) {
      drawPlaceholder(sheet, x, y, cellSize);
    } else {
      overlays.push({
        input: thumbnail.data,
        raw: { width: thumbnail.width, height: thumbnail.height, channels: 3 },
        left: x + Math.floor((cellSize - thumbnail.width) / 2),
        top: y + Math.floor((cellSize - thumbnail.height) / 2),
      });
    }
    drawCaption(sheet, contactSheetCaption(cell.rank, cell.weight), x, y + cellSize, cellSize);
  });
  return sharp(sheet.data, { raw: { width, height, channels: 3 } }).composite(overlays).png().toBuffer();
}

function validateCell(cell: ContactSheetCell, i: number): void {
  requireArg(typeof cell === 'object' && cell !== null, `cells[${i}]`, 'an object', typeof cell);
  // A string would make sharp open a file path; only buffers are images here.
  requireArg(cell.png === null || Buffer.isBuffer(cell.png), `cells[${i}].png`, 'a Buffer or null', typeof cell.png);
  requireArg(Number.isSafeInteger(cell.rank) && cell.rank >= 0, `cells[${i}].rank`, 'a non-negative integer', cell.rank);
  requireArg(Number.isFinite(cell.weight) && cell.weight >= 0 && cell.weight <= 1 + WEIGHT_SLACK, `cells[${i}].weight`, 'a number in 0..1', cell.weight);
}

interface FittedThumbnail {
  data: Buffer;
  width: number;
  height: number;
}

/** The thumbnail fitted inside side×side (aspect kept, enlarged if small) as RGB, or null when it cannot be decoded. */
async function fitThumbnail(png: Buffer, side: number): Promise<FittedThumbnail | null> {
  // The field is documented as PNG; other formats (SVG, PDF, ...) are not worth handing to their decoders.
  if (png.length < PNG_SIGNATURE.length || !png.subarray(0, PNG_SIGNATURE.length).equals(PNG_SIGNATURE)) return null;
  try {
    const { data, info } = await sharp(png, { limitInputPixels: MAX_THUMBNAIL_PIXELS })
      .resize(side, side, { fit: 'inside' })
      .flatten({ background: { r: WHITE[0], g: WHITE[1], b: WHITE[2] } })
      .toColourspace('srgb')
      .removeAlpha()
      .raw({ depth: 'uchar' })
      .toBuffer({ resolveWithObject: true });
    if (info.channels !== 3 || info.width > side || info.height > side) return null;
    return { data, width: info.width, height: info.height };
  } catch {
    return null;
  }
}

/** A light grey square with a diagonal cross: visibly "no image", and not mistakable for a white or grey photo. */
function drawPlaceholder(sheet: RawCanvas, x: number, y: number, side: number): void {
  const halfStroke = Math.max(0.5, side / 96);
  for (let dy = 0; dy < side; dy++) {
    for (let dx = 0; dx < side; dx++) {
      const onCross = Math.abs(dx - dy) <= halfStroke || Math.abs(dx + dy - (side - 1)) <= halfStroke;
      const colour = onCross ? PLACEHOLDER_CROSS : PLACEHOLDER_FILL;
      const at = ((y + dy) * sheet.width + x + dx) * 3;
      sheet.data[at] = colour[0];
      sheet.data[at + 1] = colour[1];
      sheet.data[at + 2] = colour[2];
    }
  }
}

/** Centred at 2× when it fits, else 1×; a caption too long even then is left-aligned and cut at the cell edge. */
function drawCaption(sheet: RawCanvas, text: string, x: number, top: number, side: number): void {
  const scale = textWidth(text, 2) <= side ? 2 : 1;
  const width = textWidth(text, scale);
  const left = width <= side ? x + Math.floor((side - width) / 2) : x;
  const textTop = top + Math.floor((CAPTION_HEIGHT - GLYPH_HEIGHT * scale) / 2);
  drawText(sheet, text, left, textTop, scale, CAPTION_INK, { left: x, top, right: x + side, bottom: top + CAPTION_HEIGHT });
}

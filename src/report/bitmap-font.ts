/**
 * A tiny bitmap font, so that captions render the same on every machine: servers often have no
 * system fonts, and librsvg then draws SVG text as nothing at all.
 *
 * Only the characters captions need. Each glyph is 7 rows, top to bottom, separated by '|';
 * '#' is ink, '.' is paper. Widths vary so that ' ', '.' and '<' stay narrow, which lets a
 * caption like `#12  w 0.084` fit a 128 px cell at 2×.
 */
const GLYPH_ROWS: Record<string, string> = {
  '0': '.###.|#...#|#..##|#.#.#|##..#|#...#|.###.',
  '1': '..#..|.##..|..#..|..#..|..#..|..#..|.###.',
  '2': '.###.|#...#|....#|...#.|..#..|.#...|#####',
  '3': '#####|...#.|..#..|...#.|....#|#...#|.###.',
  '4': '...#.|..##.|.#.#.|#..#.|#####|...#.|...#.',
  '5': '#####|#....|####.|....#|....#|#...#|.###.',
  '6': '..##.|.#...|#....|####.|#...#|#...#|.###.',
  '7': '#####|....#|...#.|..#..|.#...|.#...|.#...',
  '8': '.###.|#...#|#...#|.###.|#...#|#...#|.###.',
  '9': '.###.|#...#|#...#|.####|....#|...#.|.##..',
  '#': '.#.#.|.#.#.|#####|.#.#.|#####|.#.#.|.#.#.',
  '.': '.|.|.|.|.|.|#',
  '<': '...#|..#.|.#..|#...|.#..|..#.|...#',
  w: '.....|.....|#...#|#...#|#.#.#|#.#.#|.#.#.',
  ' ': '...|...|...|...|...|...|...',
};

export const GLYPH_HEIGHT = 7;

/** Blank font pixels between neighbouring glyphs. */
const GLYPH_GAP = 1;

interface Glyph {
  width: number;
  /** GLYPH_HEIGHT × width, row-major, 1 = ink. */
  ink: Uint8Array;
}

const GLYPHS: ReadonlyMap<string, Glyph> = new Map(Object.entries(GLYPH_ROWS).map(([ch, rows]) => [ch, parseGlyph(ch, rows)]));

function parseGlyph(ch: string, rows: string): Glyph {
  const lines = rows.split('|');
  const width = lines[0].length;
  // A mistyped row would otherwise draw a sheared glyph without anyone noticing; fail at import.
  if (lines.length !== GLYPH_HEIGHT || lines.some((line) => line.length !== width || /[^#.]/.test(line))) {
    throw new Error(`bitmap font: glyph ${JSON.stringify(ch)} is not ${GLYPH_HEIGHT} equal rows of '#' and '.'`);
  }
  const ink = new Uint8Array(GLYPH_HEIGHT * width);
  lines.forEach((line, y) => {
    for (let x = 0; x < width; x++) ink[y * width + x] = line[x] === '#' ? 1 : 0;
  });
  return { width, ink };
}

function glyphOf(ch: string): Glyph {
  const glyph = GLYPHS.get(ch);
  if (glyph === undefined) throw new Error(`bitmap font: no glyph for ${JSON.stringify(ch)}`);
  return glyph;
}

/** An 8-bit interleaved pixel buffer, as sharp's raw input and output use. */
export interface RawCanvas {
  data: Buffer;
  width: number;
  height: number;
  channels: number;
}

/** A rectangle in canvas pixels; right and bottom are exclusive. */
export interface ClipRect {
  left: number;
  top: number;
  right: number;
  bottom: number;
}

/** Width in canvas pixels of `text` drawn at `scale` (each font pixel becomes scale × scale). */
export function textWidth(text: string, scale: number): number {
  if (text.length === 0) return 0;
  let units = -GLYPH_GAP;
  for (const ch of text) units += glyphOf(ch).width + GLYPH_GAP;
  return units * scale;
}

/**
 * Draws `text` with its top-left corner at (x, y), writing `colour` (one value per channel) on
 * ink pixels and leaving paper untouched. Pixels outside `clip` (default: the canvas) are skipped.
 * Throws for characters the font does not have.
 */
export function drawText(
  canvas: RawCanvas,
  text: string,
  x: number,
  y: number,
  scale: number,
  colour: readonly number[],
  clip: ClipRect = { left: 0, top: 0, right: canvas.width, bottom: canvas.height },
): void {
  const left = Math.max(0, clip.left);
  const top = Math.max(0, clip.top);
  const right = Math.min(canvas.width, clip.right);
  const bottom = Math.min(canvas.height, clip.bottom);
  let penX = x;
  for (const ch of text) {
    const glyph = glyphOf(ch);
    for (let gy = 0; gy < GLYPH_HEIGHT; gy++) {
      for (let gx = 0; gx < glyph.width; gx++) {
        if (glyph.ink[gy * glyph.width + gx] === 0) continue;
        for (let py = y + gy * scale; py < y + (gy + 1) * scale; py++) {
          if (py < top || py >= bottom) continue;
          for (let px = penX + gx * scale; px < penX + (gx + 1) * scale; px++) {
            if (px < left || px >= right) continue;
            const at = (py * canvas.width + px) * canvas.channels;
            for (let c = 0; c < canvas.channels; c++) canvas.data[at + c] = colour[c];
          }
        }
      }
    }
    penX += (glyph.width + GLYPH_GAP) * scale;
  }
}

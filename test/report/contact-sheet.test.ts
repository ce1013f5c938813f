import { describe, it, expect } from 'vitest';
import sharp from 'sharp';
import { CairnError } from '../../src/errors.js';
import {
  CAPTION_HEIGHT,
  contactSheetCaption,
  renderContactSheet,
  SHEET_PADDING,
  type ContactSheetCell,
} from '../../src/report/contact-sheet.js';

interface Decoded {
  data: Buffer;
  width: number;
  height: number;
  channels: number;
}

type Rgb = [number, number, number];

async function solidPng(colour: Rgb, width = 128, height = 128): Promise<Buffer> {
  const [r, g, b] = colour;
  return sharp({ create: { width, height, channels: 3, background: { r, g, b } } }).png().toBuffer();
}

async function decode(png: Buffer): Promise<Decoded> {
  const { data, info } = await sharp(png).raw().toBuffer({ resolveWithObject: true });
  return { data, width: info.width, height: info.height, channels: info.channels };
}

/** Top-left corner of cell i's image area, from the documented layout. */
function cellOrigin(i: number, columns: number, cellSize: number): { x: number; y: number } {
  return {
    x: SHEET_PADDING + (i % columns) * (cellSize + SHEET_PADDING),
    y: SHEET_PADDING + Math.floor(i / columns) * (cellSize + CAPTION_HEIGHT + SHEET_PADDING),
  };
}

function meanColour(img: Decoded, x: number, y: number, w: number, h: number): Rgb {
  const sum = [0, 0, 0];
  for (let py = y; py < y + h; py++) {
    for (let px = x; px < x + w; px++) {
      const at = (py * img.width + px) * img.channels;
      for (let c = 0; c < 3; c++) sum[c] += img.data[at + c];
    }
  }
  return sum.map((s) => s / (w * h)) as Rgb;
}

function pixel(img: Decoded, x: number, y: number): Rgb {
  const at = (y * img.width + x) * img.channels;
  return [img.data[at], img.data[at + 1], img.data[at + 2]];
}

/** RGB bytes of a w×h region, row by row, for comparing two regions. */
function region(img: Decoded, x: number, y: number, w: number, h: number): Buffer {
  const out = Buffer.alloc(w * h * 3);
  for (let py = 0; py < h; py++) {
    for (let px = 0; px < w; px++) {
      const from = ((y + py) * img.width + x + px) * img.channels;
      img.data.copy(out, (py * w + px) * 3, from, from + 3);
    }
  }
  return out;
}

function expectColourNear(actual: Rgb, expected: Rgb, tolerance: number): void {
  for (let c = 0; c < 3; c++) expect(Math.abs(actual[c] - expected[c])).toBeLessThanOrEqual(tolerance);
}

function cell(png: Buffer | null, rank = 1, weight = 0.5): ContactSheetCell {
  return { png, rank, weight };
}

describe('renderContactSheet layout', () => {
  it('sizes the sheet as columns·cellSize + (columns+1)·padding by rows·(cellSize+caption) + (rows+1)·padding', async () => {
    expect(SHEET_PADDING).toBe(4);
    expect(CAPTION_HEIGHT).toBe(20);
    const three = [cell(null), cell(null), cell(null)];
    // 2 columns, 2 rows of 32 px cells: 2·32 + 3·4 = 76 wide, 2·(32 + 20) + 3·4 = 116 high.
    const sheet = await decode(await renderContactSheet(three, { columns: 2, cellSize: 32 }));
    expect([sheet.width, sheet.height]).toEqual([76, 116]);
    // Explicit columns are kept even when there are fewer cells: 5·40 + 6·4 = 224 by 40 + 20 + 8 = 68.
    const wide = await decode(await renderContactSheet(three, { columns: 5, cellSize: 40 }));
    expect([wide.width, wide.height]).toEqual([224, 68]);
  });

  it('defaults to ceil(√n) columns of 128 px cells', async () => {
    // n = 5: 3 columns, 2 rows; 3·128 + 4·4 = 400 wide, 2·148 + 3·4 = 308 high.
    const five = Array.from({ length: 5 }, () => cell(null));
    const sheet = await decode(await renderContactSheet(five));
    expect([sheet.width, sheet.height]).toEqual([400, 308]);
  });

  it('caps the default at 10 columns', async () => {
    // n = 150: ceil(√150) = 13, capped to 10 columns of 16 px, 15 rows: 10·16 + 11·4 = 204, 15·36 + 16·4 = 604.
    const many = Array.from({ length: 150 }, (_, i) => cell(null, i + 1, 0.001));
    const sheet = await decode(await renderContactSheet(many, { cellSize: 16 }));
    expect([sheet.width, sheet.height]).toEqual([204, 604]);
  });

  it('outputs a PNG on a white background', async () => {
    const png = await renderContactSheet([cell(null)], { cellSize: 32 });
    expect(png.subarray(0, 8)).toEqual(Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]));
    const sheet = await decode(png);
    expect(pixel(sheet, 0, 0)).toEqual([255, 255, 255]);
    expect(pixel(sheet, sheet.width - 1, sheet.height - 1)).toEqual([255, 255, 255]);
  });
});

describe('renderContactSheet images', () => {
  it('reproduces each thumbnail colour in its cell, in the order given', async () => {
    const colours: Rgb[] = [
      [255, 0, 0],
      [0, 255, 0],
      [0, 0, 255],
    ];
    const cells = await Promise.all(colours.map(async (c, i) => cell(await solidPng(c), i + 1, 0.3)));
    const cellSize = 64;
    const sheet = await decode(await renderContactSheet(cells, { columns: 2, cellSize }));
    colours.forEach((colour, i) => {
      const { x, y } = cellOrigin(i, 2, cellSize);
      // Inset by 2 px so resampling at the edges does not blur into the white padding.
      expectColourNear(meanColour(sheet, x + 2, y + 2, cellSize - 4, cellSize - 4), colour, 2);
    });
  });

  it('fits a non-square thumbnail keeping its aspect, centred, with white around it', async () => {
    const cellSize = 64;
    // 128×64 red fits as 64×32, so rows 16..47 of the image area are red, the rest white.
    const sheet = await decode(await renderContactSheet([cell(await solidPng([255, 0, 0], 128, 64))], { cellSize }));
    const { x, y } = cellOrigin(0, 1, cellSize);
    expectColourNear(meanColour(sheet, x + 1, y + 18, cellSize - 2, 28), [255, 0, 0], 2);
    expectColourNear(meanColour(sheet, x, y, cellSize, 14), [255, 255, 255], 0);
    expectColourNear(meanColour(sheet, x, y + 50, cellSize, 14), [255, 255, 255], 0);
  });

  it('enlarges a thumbnail smaller than the cell to fill it', async () => {
    const cellSize = 64;
    const sheet = await decode(await renderContactSheet([cell(await solidPng([0, 0, 255], 16, 16))], { cellSize }));
    const { x, y } = cellOrigin(0, 1, cellSize);
    expectColourNear(meanColour(sheet, x + 1, y + 1, cellSize - 2, cellSize - 2), [0, 0, 255], 2);
  });

  it('draws a grey placeholder with a darker cross for a null, damaged or non-PNG thumbnail', async () => {
    const good = await solidPng([255, 0, 0]);
    const truncated = good.subarray(0, Math.floor(good.length / 2));
    // The truncated file must really be undecodable, or this test proves nothing.
    await expect(sharp(truncated).raw().toBuffer()).rejects.toThrow();
    const jpeg = await sharp({ create: { width: 32, height: 32, channels: 3, background: '#ff0000' } }).jpeg().toBuffer();
    const inputs = [null, truncated, Buffer.from('not an image at all'), Buffer.alloc(0), jpeg];
    const cellSize = 48;
    const sheet = await decode(await renderContactSheet(inputs.map((png) => cell(png)), { columns: 5, cellSize }));
    inputs.forEach((_, i) => {
      const { x, y } = cellOrigin(i, 5, cellSize);
      const [r, g, b] = meanColour(sheet, x, y, cellSize, cellSize);
      expect(Math.max(r, g, b) - Math.min(r, g, b)).toBeLessThan(1);
      expect(r).toBeGreaterThan(150);
      expect(r).toBeLessThan(240);
      // The centre lies on both diagonals, the middle of the top edge on neither.
      const centre = pixel(sheet, x + cellSize / 2, y + cellSize / 2);
      const edge = pixel(sheet, x + cellSize / 2, y + 1);
      expect(centre[0]).toBeLessThan(edge[0] - 20);
    });
  });
});

describe('renderContactSheet captions', () => {
  it('formats rank and weight with 3 decimals, and tiny weights as <0.001', () => {
    expect(contactSheetCaption(3, 0.0841)).toBe('#3  w 0.084');
    expect(contactSheetCaption(12, 1)).toBe('#12  w 1.000');
    expect(contactSheetCaption(7, 0.001)).toBe('#7  w 0.001');
    expect(contactSheetCaption(7, 0.00099)).toBe('#7  w <0.001');
    expect(contactSheetCaption(1, 0)).toBe('#1  w <0.001');
  });

  it('draws dark caption text that differs between different ranks and weights', async () => {
    const red = await solidPng([255, 0, 0]);
    const cells = [cell(red, 1, 0.5), cell(red, 1, 0.5), cell(red, 2, 0.0004)];
    const cellSize = 128;
    const sheet = await decode(await renderContactSheet(cells, { columns: 3, cellSize }));
    const strips = cells.map((_, i) => {
      const { x, y } = cellOrigin(i, 3, cellSize);
      return region(sheet, x, y + cellSize, cellSize, CAPTION_HEIGHT);
    });
    for (const strip of strips) {
      let dark = 0;
      for (let i = 0; i < strip.length; i += 3) if (strip[i] < 80 && strip[i + 1] < 80 && strip[i + 2] < 80) dark++;
      // 2× glyphs: each of the ~10 characters contributes dozens of dark pixels.
      expect(dark).toBeGreaterThan(100);
    }
    // Same caption, same pixels (so the difference below comes from the text, not the position).
    expect(strips[0].equals(strips[1])).toBe(true);
    expect(strips[0].equals(strips[2])).toBe(false);
  });

  it('keeps a caption inside its own cell when it is too long for the cell', async () => {
    const cellSize = 16;
    const sheet = await decode(await renderContactSheet([cell(null, 123456, 0.5), cell(null, 1, 0.5)], { columns: 2, cellSize }));
    // The padding column between the two cells' caption strips stays white.
    const gapX = SHEET_PADDING + cellSize;
    const y = SHEET_PADDING + cellSize;
    expectColourNear(meanColour(sheet, gapX, y, SHEET_PADDING, CAPTION_HEIGHT), [255, 255, 255], 0);
    // But there is text in the first strip.
    const [r] = meanColour(sheet, SHEET_PADDING, y, cellSize, CAPTION_HEIGHT);
    expect(r).toBeLessThan(250);
  });
});

describe('renderContactSheet validation', () => {
  const ok = [cell(null)];

  async function expectInvalid(run: () => Promise<unknown>): Promise<void> {
    const err = await run().then(
      () => null,
      (e: unknown) => e,
    );
    expect(err).toBeInstanceOf(CairnError);
    expect((err as CairnError).code).toBe('INVALID_ARGUMENT');
  }

  it.each([0, 101, 1.5, Number.NaN, -3])('rejects columns %s', async (columns) => {
    await expectInvalid(() => renderContactSheet(ok, { columns }));
  });

  it.each([15, 513, 64.5, Number.NaN])('rejects cellSize %s', async (cellSize) => {
    await expectInvalid(() => renderContactSheet(ok, { cellSize }));
  });

  it('accepts the boundary options', async () => {
    await expect(renderContactSheet(ok, { columns: 100, cellSize: 16 })).resolves.toBeInstanceOf(Buffer);
    await expect(renderContactSheet(ok, { columns: 1, cellSize: 512 })).resolves.toBeInstanceOf(Buffer);
  });

  it('rejects an empty cell list and one longer than 2000', async () => {
    await expectInvalid(() => renderContactSheet([]));
    await expectInvalid(() => renderContactSheet(Array.from({ length: 2001 }, () => cell(null))));
  });

  it('rejects a sheet too large to assemble in memory', async () => {
    await expectInvalid(() => renderContactSheet(Array.from({ length: 2000 }, () => cell(null)), { columns: 100, cellSize: 512 }));
  });

  it('rejects cells with a bad rank, weight or png', async () => {
    await expectInvalid(() => renderContactSheet([cell(null, -1)]));
    await expectInvalid(() => renderContactSheet([cell(null, 1.5)]));
    await expectInvalid(() => renderContactSheet([cell(null, 1, Number.NaN)]));
    await expectInvalid(() => renderContactSheet([cell(null, 1, -0.2)]));
    await expectInvalid(() => renderContactSheet([cell(null, 1, 2)]));
    await expectInvalid(() => renderContactSheet([{ png: '/etc/passwd', rank: 1, weight: 0.5 } as unknown as ContactSheetCell]));
  });
});

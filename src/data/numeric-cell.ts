/** Spellings of non-finite values written by numpy, pandas, R and spreadsheets, lower-cased. */
const NON_FINITE: ReadonlyMap<string, number> = new Map([
  ['nan', NaN],
  ['-nan', NaN],
  ['+nan', NaN],
  ['inf', Infinity],
  ['+inf', Infinity],
  ['infinity', Infinity],
  ['+infinity', Infinity],
  ['-inf', -Infinity],
  ['-infinity', -Infinity],
]);

/** Characters Number() accepts in hex / octal / binary literals, which are not decimal data. */
const NON_DECIMAL = /[xXoObB]/;

/**
 * A decimal number from a text cell, or undefined when the cell is not a number.
 * An empty (or blank) cell is NaN: pandas writes missing values that way, and NaN then follows the
 * nonFinite policy (fail naming the row, or drop) instead of failing as "not a number".
 * Surrounding whitespace is ignored.
 */
export function parseNumericCell(cell: string): number | undefined {
  const text = cell.trim();
  if (text === '') return NaN;
  const value = Number(text);
  if (!Number.isNaN(value)) return NON_DECIMAL.test(text) ? undefined : value;
  return NON_FINITE.get(text.toLowerCase());
}

/** True when a cell reads as a finite number: used to tell a header row from a data row. */
export function isFiniteNumericCell(cell: string): boolean {
  const value = cell.trim() === '' ? undefined : parseNumericCell(cell);
  return value !== undefined && Number.isFinite(value);
}

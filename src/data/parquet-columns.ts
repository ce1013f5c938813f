import type { FileMetaData, SchemaElement, SchemaTree } from 'hyparquet';
import { parquetSchema } from 'hyparquet';
import { CairnError } from '../errors.js';
import { badFile } from './parquet-file.js';
import type { ReadOptions } from './reader.js';

/** Which top-level columns hold what. */
export interface ColumnPlan {
  /** One list column (vector per row), or several scalar columns (one feature each). */
  vector: { kind: 'list'; name: string } | { kind: 'scalars'; names: string[] };
  id?: string;
  label?: string;
}

/**
 * Chooses the columns from the schema. The vector: options.vectorField if named (a numeric list or
 * a numeric scalar column), else the only top-level list of numbers (fixed-size lists are stored as
 * lists too), else every top-level FLOAT / DOUBLE / FLOAT16 column other than id and label, in
 * schema order. The id: options.idField, else a column named `id` if any; the label likewise.
 */
export function planColumns(metadata: FileMetaData, options: ReadOptions): ColumnPlan {
  let root: SchemaTree;
  try {
    root = parquetSchema(metadata);
  } catch (err) {
    throw badFile(err);
  }
  const top = new Map(root.children.map((node) => [node.element.name, node]));
  const pick = (option: string | undefined, fallback: string, role: string): string | undefined => {
    const name = option ?? fallback;
    const node = top.get(name);
    if (!node) {
      if (option === undefined) return undefined;
      throw new CairnError('PARQUET_UNKNOWN_COLUMN', `The ${role} column ${JSON.stringify(option)} is not in the file.`, { column: option });
    }
    if (node.children.length > 0 || node.element.repetition_type === 'REPEATED') {
      throw new CairnError('PARQUET_UNKNOWN_COLUMN', `The ${role} column ${JSON.stringify(name)} is not a plain (scalar) column.`, { column: name });
    }
    return name;
  };
  const id = pick(options.idField, 'id', 'id');
  const label = pick(options.labelField, 'label', 'label');
  const others = root.children.filter((node) => node.element.name !== id && node.element.name !== label);

  if (options.vectorField !== undefined) {
    const node = top.get(options.vectorField);
    if (!node) {
      throw new CairnError('PARQUET_UNKNOWN_COLUMN', `The vector column ${JSON.stringify(options.vectorField)} is not in the file.`, {
        column: options.vectorField,
      });
    }
    if (isNumericList(node)) return { vector: { kind: 'list', name: options.vectorField }, id, label };
    if (isNumericLeaf(node.element) && node.children.length === 0) return { vector: { kind: 'scalars', names: [options.vectorField] }, id, label };
    throw new CairnError('PARQUET_NO_VECTOR', `The column ${JSON.stringify(options.vectorField)} is not numeric.`, { column: options.vectorField });
  }
  const lists = others.filter(isNumericList).map((node) => node.element.name);
  if (lists.length === 1) return { vector: { kind: 'list', name: lists[0] }, id, label };
  if (lists.length > 1) {
    throw new CairnError('PARQUET_NO_VECTOR', `Several list columns could hold the vectors (${lists.join(', ')}); name one with vectorField.`, {
      candidates: lists,
    });
  }
  const scalars = others.filter((node) => node.children.length === 0 && isFloatLeaf(node.element) && node.element.repetition_type !== 'REPEATED');
  if (scalars.length === 0) throw new CairnError('PARQUET_NO_VECTOR');
  return { vector: { kind: 'scalars', names: scalars.map((node) => node.element.name) }, id, label };
}

/** A LIST of numbers (3-level or 2-level layout) or a legacy repeated numeric field. */
function isNumericList(node: SchemaTree): boolean {
  const { element } = node;
  if (node.children.length === 0) return element.repetition_type === 'REPEATED' && isNumericLeaf(element);
  const annotated = element.converted_type === 'LIST' || element.logical_type?.type === 'LIST';
  if (!annotated || node.children.length !== 1) return false;
  const repeated = node.children[0];
  if (repeated.element.repetition_type !== 'REPEATED') return false;
  if (repeated.children.length === 0) return isNumericLeaf(repeated.element);
  return repeated.children.length === 1 && repeated.children[0].children.length === 0 && isNumericLeaf(repeated.children[0].element);
}

function isFloatLeaf(element: SchemaElement): boolean {
  return element.type === 'FLOAT' || element.type === 'DOUBLE' || element.logical_type?.type === 'FLOAT16';
}

/** Floats, and integers that hyparquet returns as numbers or bigints (not dates, times or decimals). */
function isNumericLeaf(element: SchemaElement): boolean {
  if (isFloatLeaf(element)) return true;
  if (element.type !== 'INT32' && element.type !== 'INT64') return false;
  const converted = element.converted_type;
  const logical = element.logical_type?.type;
  return (converted === undefined || /^U?INT_/.test(converted)) && (logical === undefined || logical === 'INTEGER');
}

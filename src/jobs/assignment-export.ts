import { createReadStream } from 'node:fs';
import { open } from 'node:fs/promises';
import { createInterface } from 'node:readline';
import { CairnError } from '../errors.js';
import { assignmentOffsets } from './assignments.js';

export type AssignmentFormat = 'ndjson' | 'csv';

/** Rows per read of assignments.bin and per yielded text chunk. */
const BLOCK = 8192;

/**
 * Streams every item's nearest representative: id, index, rank and id of the representative, the
 * distance in the selection space, and whether it is a new representative or a fixed item. Reads the dataset's items.jsonl line by line and
 * assignments.bin in blocks, so memory stays small whatever the dataset's size.
 */
export async function* assignmentRows(
  itemsFile: string,
  assignmentsFile: string,
  rows: number,
  representativeIds: readonly string[],
  format: AssignmentFormat,
  fixedIds: readonly string[] = [],
): AsyncGenerator<string> {
  const fh = await open(assignmentsFile, 'r');
  const input = createReadStream(itemsFile, 'utf8');
  const rl = createInterface({ input, crlfDelay: Infinity });
  // The iterator is taken at once: readline emits lines as soon as the file is read, and lines (and
  // the end) emitted before an iterator exists are lost, so iterating after the awaits below could
  // wait for ever on a small file.
  const lines = rl[Symbol.asyncIterator]();
  try {
    if ((await fh.stat()).size !== rows * 8) throw new CairnError('DATASET_STORE_CORRUPT', 'assignments.bin does not match the dataset.');
    if (format === 'csv') yield 'id,index,rank,representative_id,distance,representative_kind\n';
    const rank = Buffer.alloc(BLOCK * 4);
    const dist = Buffer.alloc(BLOCK * 4);
    let i = 0;
    let blockStart = 0;
    let blockCount = 0;
    let out: string[] = [];
    for (let next = await lines.next(); !next.done; next = await lines.next()) {
      const line = next.value;
      if (i >= blockStart + blockCount) {
        if (out.length) yield out.join('');
        out = [];
        blockStart = i;
        blockCount = Math.min(BLOCK, rows - i);
        if (blockCount <= 0) throw new CairnError('DATASET_STORE_CORRUPT', 'items.jsonl has more lines than the dataset has rows.');
        const o = assignmentOffsets(rows, i);
        await fh.read(rank, 0, blockCount * 4, o.rank);
        await fh.read(dist, 0, blockCount * 4, o.distance);
      }
      const id = (JSON.parse(line) as { id: string }).id;
      const r = rank.readInt32LE((i - blockStart) * 4);
      const d = dist.readFloatLE((i - blockStart) * 4);
      // Rank −(j+1): the nearest is fixed item j (an item that counted as a representative already).
      const isFixed = r < 0;
      const repId = isFixed ? fixedIds[-r - 1] : representativeIds[r - 1];
      const kind = isFixed ? 'fixed' : 'new';
      out.push(
        format === 'ndjson'
          ? JSON.stringify({ id, index: i, rank: isFixed ? null : r, representativeId: repId, distance: d, representativeKind: kind }) + '\n'
          : `${csvCell(id)},${i},${isFixed ? '' : r},${csvCell(repId)},${d},${kind}\n`,
      );
      i++;
    }
    if (out.length) yield out.join('');
    if (i !== rows) throw new CairnError('DATASET_STORE_CORRUPT', 'items.jsonl has fewer lines than the dataset has rows.');
  } finally {
    rl.close();
    input.destroy();
    await fh.close();
  }
}

/** RFC 4180 quoting. Ids are written exactly as stored (no spreadsheet formula guard: a pipeline must get its ids back unchanged). */
export function csvCell(value: string): string {
  return /[",\n\r]/.test(value) ? `"${value.replace(/"/g, '""')}"` : value;
}

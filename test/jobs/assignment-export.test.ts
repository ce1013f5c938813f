import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { assignmentRows, csvCell } from '../../src/jobs/assignment-export.js';
import { encodeAssignments } from '../../src/jobs/assignments.js';

describe('assignment export', () => {
  const dir = mkdtempSync(join(tmpdir(), 'cairn-export-test-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  const rows = 5;
  const items = join(dir, 'items.jsonl');
  const bin = join(dir, 'assignments.bin');
  writeFileSync(items, ['a', 'b,c', 'd"e', 'f', 'g'].map((id) => JSON.stringify({ id, label: null })).join('\n') + '\n');
  writeFileSync(bin, encodeAssignments(Int32Array.of(1, 2, -1, 1, 2), Float32Array.of(0, 0.5, 0.25, 1, 2)));

  it('a consumer that pauses after the header still gets every row (the item lines are not lost while it waits)', async () => {
    const gen = assignmentRows(items, bin, rows, ['a', 'g'], 'csv', ['fixed-1']);
    const header = await gen.next();
    expect(header.value).toBe('id,index,rank,representative_id,distance,representative_kind\n');
    // Long enough for the small items file to be read to its end before the rows are asked for.
    await new Promise((r) => setTimeout(r, 100));
    let text = '';
    for (let next = await gen.next(); !next.done; next = await gen.next()) text += next.value;
    expect(text.trim().split('\n')).toEqual(['a,0,1,a,0,new', '"b,c",1,2,g,0.5,new', '"d""e",2,,fixed-1,0.25,fixed', 'f,3,1,a,1,new', 'g,4,2,g,2,new']);
  }, 10_000);

  it('NDJSON marks rows nearest a fixed item', async () => {
    let text = '';
    for await (const chunk of assignmentRows(items, bin, rows, ['a', 'g'], 'ndjson', ['fixed-1'])) text += chunk;
    const lines = text.trim().split('\n').map((l) => JSON.parse(l) as Record<string, unknown>);
    expect(lines[2]).toEqual({ id: 'd"e', index: 2, rank: null, representativeId: 'fixed-1', distance: 0.25, representativeKind: 'fixed' });
    expect(lines[4]).toMatchObject({ rank: 2, representativeId: 'g', representativeKind: 'new' });
  });

  it('refuses an assignments file that does not match the dataset', async () => {
    const gen = assignmentRows(items, bin, rows + 1, ['a'], 'ndjson');
    await expect(gen.next()).rejects.toMatchObject({ code: 'DATASET_STORE_CORRUPT' });
  });

  it('quotes CSV cells as RFC 4180 says, and leaves other ids as they are', () => {
    expect(csvCell('plain-id')).toBe('plain-id');
    expect(csvCell('=1+1')).toBe('=1+1');
    expect(csvCell('a,b')).toBe('"a,b"');
    expect(csvCell('say "hi"')).toBe('"say ""hi"""');
  });
});

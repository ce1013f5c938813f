/**
 * assignments.bin: for every row, the rank (1-based, int32) of its nearest representative (−(j+1)
 * when it is fixed item j), then
 * for every row its distance to it (float32), little-endian — 8 bytes a row, written once by the
 * selection and streamed out by the export without holding it whole in memory.
 */
export function encodeAssignments(rank: Int32Array, distance: Float32Array): Buffer {
  const n = rank.length;
  const out = Buffer.alloc(n * 8);
  for (let i = 0; i < n; i++) {
    out.writeInt32LE(rank[i], i * 4);
    out.writeFloatLE(distance[i], n * 4 + i * 4);
  }
  return out;
}

/** Byte offsets of row i's rank and distance in assignments.bin for a dataset of n rows. */
export function assignmentOffsets(n: number, i: number): { rank: number; distance: number } {
  return { rank: i * 4, distance: n * 4 + i * 4 };
}

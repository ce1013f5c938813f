const CANONICAL_INT = /^(0|[1-9][0-9]*)$/;

/**
 * The set of item ids seen while streaming, for duplicate detection.
 *
 * Most datasets either have no ids (they are "0", "1", … by row) or have their own. The first
 * kind is kept as a counter instead of a Set: ids "0".."prefix-1" at rows 0..prefix-1. Only once
 * an id breaks that pattern do ids go into the Set, so a 50 M-row .npy costs no memory here.
 */
export class IdRegistry {
  private prefix = 0;
  private sequential = true;
  private readonly seen = new Set<string>();

  /** Records `id` at stored row `row` (rows come in order). False when the id was already there. */
  add(id: string, row: number): boolean {
    if (this.sequential) {
      if (row === this.prefix && id === String(row)) {
        this.prefix++;
        return true;
      }
      this.sequential = false;
    }
    if (this.prefixRow(id) !== undefined || this.seen.has(id)) return false;
    this.seen.add(id);
    return true;
  }

  /** The row of `id` when it is one of the counted "0".."prefix-1" ids. */
  prefixRow(id: string): number | undefined {
    if (!CANONICAL_INT.test(id)) return undefined;
    const n = Number(id);
    return n < this.prefix ? n : undefined;
  }
}

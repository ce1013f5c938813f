import type { LabelCodes } from '../core/coverage.js';

/** Item labels as integer codes (−1: no label) and the code → name table, for coverage statistics. */
export function labelCodes(labels: readonly (string | null)[]): LabelCodes {
  const names: string[] = [];
  const codeOf = new Map<string, number>();
  const codes = new Int32Array(labels.length);
  labels.forEach((label, i) => {
    if (label === null) {
      codes[i] = -1;
      return;
    }
    let code = codeOf.get(label);
    if (code === undefined) {
      code = names.length;
      names.push(label);
      codeOf.set(label, code);
    }
    codes[i] = code;
  });
  return { codes, names };
}

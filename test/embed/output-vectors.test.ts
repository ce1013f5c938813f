import { describe, expect, it } from 'vitest';
import { firstNonFinite, normalizeRows, poolOutput } from '../../src/embed/output-vectors.js';

describe('output pooling', () => {
  // Two images of [positions 3, dim 2]: image 0 rows (1,2) (3,4) (5,6); image 1 rows (0,0) (6,3) (0,3).
  const data = Float32Array.of(1, 2, 3, 4, 5, 6, 0, 0, 6, 3, 0, 3);

  it("mean averages every axis between the batch axis and the last: [2,3,2] → [2,2]", () => {
    // Image 0: ((1+3+5)/3, (2+4+6)/3) = (3, 4); image 1: (6/3, 6/3) = (2, 2).
    const pooled = poolOutput(data, [2, 3, 2], 'mean');
    expect(pooled).toEqual({ ok: true, dim: 2, vectors: Float32Array.of(3, 4, 2, 2) });
    // [batch, 1, 3, 2] pools the same way: both middle axes are averaged.
    expect(poolOutput(data, [2, 1, 3, 2], 'mean')).toEqual(pooled);
  });

  it('flatten reads [batch, ...] row-major as [batch, product]', () => {
    expect(poolOutput(data, [2, 3, 2], 'flatten')).toEqual({ ok: true, dim: 6, vectors: data });
  });

  it("none takes [batch, dim] as it is and refuses any other rank", () => {
    expect(poolOutput(data, [2, 6], 'none')).toEqual({ ok: true, dim: 6, vectors: data });
    expect(poolOutput(data, [2, 3, 2], 'none').ok).toBe(false);
    expect(poolOutput(data, [12], 'flatten').ok).toBe(false);
    expect(poolOutput(data, [2, 5], 'none').ok).toBe(false);
  });

  it('normalizes rows to unit length and leaves a zero row zero', () => {
    // (3, 4) has norm 5 → (0.6, 0.8).
    expect(normalizeRows(Float32Array.of(3, 4, 0, 0), 2, 2)).toEqual(Float32Array.of(Math.fround(0.6), Math.fround(0.8), 0, 0));
  });

  it('finds the first NaN or infinity', () => {
    expect(firstNonFinite(Float32Array.of(1, 2, 3))).toBe(-1);
    expect(firstNonFinite(Float32Array.of(1, Infinity, NaN))).toBe(1);
    expect(firstNonFinite(Float32Array.of(0, 0, NaN))).toBe(2);
  });
});

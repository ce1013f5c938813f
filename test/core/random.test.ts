import { describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';

describe('seeded generator', () => {
  it('gives the same stream for the same seed and different streams for different seeds', () => {
    const a = new Rng(42);
    const b = new Rng(42);
    const c = new Rng(43);
    const sa = Array.from({ length: 100 }, () => a.nextUint32());
    expect(Array.from({ length: 100 }, () => b.nextUint32())).toEqual(sa);
    expect(Array.from({ length: 100 }, () => c.nextUint32())).not.toEqual(sa);
  });

  it('resumes the same stream from a saved state', () => {
    const a = new Rng(7);
    for (let i = 0; i < 37; i++) a.next();
    const saved = a.state();
    const rest = Array.from({ length: 50 }, () => a.next());
    const b = Rng.fromState(saved);
    expect(Array.from({ length: 50 }, () => b.next())).toEqual(rest);
  });

  it('draws uniforms with mean ½ and variance 1/12, and normals with mean 0 and variance 1, within 5 standard errors', () => {
    const rng = new Rng(1);
    const n = 200_000;
    let s = 0;
    let s2 = 0;
    let z = 0;
    let z2 = 0;
    let lo = Infinity;
    let hi = -Infinity;
    for (let i = 0; i < n; i++) {
      const u = rng.next();
      lo = Math.min(lo, u);
      hi = Math.max(hi, u);
      s += u;
      s2 += u * u;
      const g = rng.normal();
      z += g;
      z2 += g * g;
    }
    expect(lo).toBeGreaterThanOrEqual(0);
    expect(hi).toBeLessThan(1);
    expect(Math.abs(s / n - 0.5)).toBeLessThan(5 * Math.sqrt(1 / 12 / n));
    expect(Math.abs(s2 / n - s * s / n / n - 1 / 12)).toBeLessThan(5 * Math.sqrt(1 / 180 / n));
    expect(Math.abs(z / n)).toBeLessThan(5 / Math.sqrt(n));
    expect(Math.abs(z2 / n - 1)).toBeLessThan(5 * Math.sqrt(2 / n));
  });

  it('samples distinct indices in range', () => {
    const rng = new Rng(5);
    for (const [n, m] of [[10, 10], [1000, 7], [5, 1], [100_000, 5000]]) {
      const s = rng.sample(n, m);
      expect(new Set(s).size).toBe(m);
      for (const v of s) expect(v >= 0 && v < n).toBe(true);
    }
    expect(() => rng.sample(3, 4)).toThrow(RangeError);
  });
});

import { describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import { principalAxes, projectRows } from '../../src/report/projection.js';

const DEG = Math.PI / 180;

/**
 * n points of a 2-D Gaussian with standard deviations (major, minor) along axes rotated by `angle`
 * from the x axis, centred at (cx, cy).
 */
function rotatedGaussian(n: number, angle: number, major: number, minor: number, seed: number, cx = 0, cy = 0): Float64Array {
  const rng = new Rng(seed);
  const out = new Float64Array(n * 2);
  const c = Math.cos(angle);
  const s = Math.sin(angle);
  for (let i = 0; i < n; i++) {
    const u = major * rng.normal();
    const w = minor * rng.normal();
    out[i * 2] = cx + u * c - w * s;
    out[i * 2 + 1] = cy + u * s + w * c;
  }
  return out;
}

/** Angle between two undirected axes in degrees, 0..90 (an axis and its negative are the same axis). */
function axisAngleDeg(ax: ArrayLike<number>, bx: ArrayLike<number>): number {
  let dot = 0;
  let na = 0;
  let nb = 0;
  for (let j = 0; j < ax.length; j++) {
    dot += ax[j] * bx[j];
    na += ax[j] * ax[j];
    nb += bx[j] * bx[j];
  }
  return Math.acos(Math.min(1, Math.abs(dot) / Math.sqrt(na * nb))) / DEG;
}

describe('principalAxes (power iteration)', () => {
  // Own derivation of the tolerance: for a Gaussian with covariance eigenvalues λ₁ > λ₂, the angle
  // between the sample's and the population's first eigenvector is asymptotically normal with
  // variance λ₁λ₂ / (n (λ₁ − λ₂)²) (the first-order perturbation of the eigenvector; Anderson 1963).
  // Here λ₁ = 9, λ₂ = 0.25, n = 2000: sd = sqrt(2.25 / (2000 · 8.75²)) ≈ 0.0038 rad ≈ 0.22°, so
  // 2° is about 9 standard deviations, while a wrong axis would miss by tens of degrees.
  it.each([0, 35, 90, 123, 171])('recovers the first axis of an elongated 2-D Gaussian rotated by %d° within 2°', (degrees) => {
    const n = 2000;
    const data = rotatedGaussian(n, degrees * DEG, 3, 0.5, 1000 + degrees, 5, -2);
    const pa = principalAxes(data, n, 2);
    const truth = [Math.cos(degrees * DEG), Math.sin(degrees * DEG)];
    expect(axisAngleDeg(pa.axes[0], truth)).toBeLessThan(2);
    // The second axis is the perpendicular one, and the variances are the eigenvalues 9 and 0.25.
    expect(Math.abs(pa.axes[0][0] * pa.axes[1][0] + pa.axes[0][1] * pa.axes[1][1])).toBeLessThan(1e-9);
    expect(pa.variances[0]).toBeGreaterThan(9 * 0.9);
    expect(pa.variances[0]).toBeLessThan(9 * 1.1);
    expect(pa.variances[1]).toBeGreaterThan(0.25 * 0.9);
    expect(pa.variances[1]).toBeLessThan(0.25 * 1.1);
    // Two axes of 2-D data explain everything.
    expect(pa.variances[0] + pa.variances[1]).toBeCloseTo(pa.totalVariance, 9);
    expect(Array.from(pa.mean).map((m) => Math.round(m))).toEqual([5, -2]);
  });

  it('recovers a direction hidden in higher dimensions, with unit, orthogonal axes', () => {
    const n = 1500;
    const cols = 12;
    const rng = new Rng(7);
    const u = Float64Array.from({ length: cols }, () => rng.normal());
    const un = Math.hypot(...u);
    for (let j = 0; j < cols; j++) u[j] /= un;
    const data = new Float32Array(n * cols);
    for (let i = 0; i < n; i++) {
      const t = 4 * rng.normal();
      for (let j = 0; j < cols; j++) data[i * cols + j] = t * u[j] + 0.3 * rng.normal() + j;
    }
    const pa = principalAxes(data, n, cols, { components: 3 });
    expect(pa.axes).toHaveLength(3);
    expect(axisAngleDeg(pa.axes[0], u)).toBeLessThan(2);
    for (let a = 0; a < 3; a++) {
      expect(pa.axes[a].reduce((s, x) => s + x * x, 0)).toBeCloseTo(1, 12);
      for (let b = 0; b < a; b++) expect(Math.abs(pa.axes[a].reduce((s, x, j) => s + x * pa.axes[b][j], 0))).toBeLessThan(1e-9);
    }
    expect(pa.variances[0]).toBeGreaterThan(pa.variances[1]);
    expect(pa.variances[1]).toBeGreaterThanOrEqual(pa.variances[2]);
  });

  it('projections are centred and their variance is the axis variance (the Rayleigh quotient)', () => {
    const n = 800;
    const data = rotatedGaussian(n, 20 * DEG, 2, 1, 3, 10, 10);
    const pa = principalAxes(data, n, 2);
    const xy = projectRows(data, n, pa);
    for (let a = 0; a < 2; a++) {
      let sum = 0;
      let sq = 0;
      for (let i = 0; i < n; i++) {
        sum += xy[i * 2 + a];
        sq += xy[i * 2 + a] ** 2;
      }
      expect(sum / n).toBeCloseTo(0, 9);
      expect(sq / n).toBeCloseTo(pa.variances[a], 9);
    }
  });

  it('handles data on a line: the first axis is exact and the second has no variance', () => {
    const n = 50;
    const cols = 4;
    const u = [0.5, -0.5, 0.5, 0.5];
    const data = new Float64Array(n * cols);
    for (let i = 0; i < n; i++) for (let j = 0; j < cols; j++) data[i * cols + j] = (i - 20) * u[j] + 1;
    const pa = principalAxes(data, n, cols);
    expect(axisAngleDeg(pa.axes[0], u)).toBeLessThan(1e-6);
    expect(pa.variances[1]).toBeLessThan(1e-12);
    expect(pa.axes[1].reduce((s, x) => s + x * x, 0)).toBeCloseTo(1, 12);
  });

  it('standardize makes the axes independent of the columns’ units', () => {
    const n = 1000;
    const plain = rotatedGaussian(n, 30 * DEG, 3, 1, 11);
    const scaled = plain.map((v, i) => (i % 2 === 0 ? v * 1000 : v));
    const a = principalAxes(plain.map((v, i) => v / Math.sqrt(varianceOfColumn(plain, n, i % 2))), n, 2);
    const b = principalAxes(scaled, n, 2, { standardize: true });
    expect(axisAngleDeg(a.axes[0], b.axes[0])).toBeLessThan(1e-6);
    expect(b.totalVariance).toBeCloseTo(2, 12);
  });

  it('is deterministic, fixes the sign, and handles one row, one column and constant data', () => {
    const data = rotatedGaussian(300, 60 * DEG, 3, 1, 5);
    const a = principalAxes(data, 300, 2);
    const b = principalAxes(data, 300, 2);
    expect(Array.from(a.axes[0])).toEqual(Array.from(b.axes[0]));
    for (const axis of a.axes) {
      const big = axis.reduce((best, x) => (Math.abs(x) > Math.abs(best) ? x : best), 0);
      expect(big).toBeGreaterThan(0);
    }
    const one = principalAxes([1, 2, 3], 1, 3);
    expect(one.variances).toEqual([0, 0]);
    expect(one.axes.map((x) => x.reduce((s, v) => s + v * v, 0))).toEqual([1, 1]);
    const column = principalAxes([1, 2, 3, 4], 4, 1);
    expect(column.axes).toHaveLength(1);
    expect(column.variances[0]).toBeCloseTo(1.25, 12);
    const constant = principalAxes(new Float64Array(20).fill(3), 10, 2, { standardize: true });
    expect(constant.variances).toEqual([0, 0]);
    expect(() => principalAxes([], 0, 2)).toThrow(RangeError);
  });
});

function varianceOfColumn(data: Float64Array, n: number, col: number): number {
  let mean = 0;
  for (let i = 0; i < n; i++) mean += data[i * 2 + col];
  mean /= n;
  let v = 0;
  for (let i = 0; i < n; i++) v += (data[i * 2 + col] - mean) ** 2;
  return v / n;
}

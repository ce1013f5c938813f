import type { ComputeBackend } from '../compute/backend.js';
import { kernelAtZero, type KernelSpec } from '../compute/kernel-spec.js';
import type { Rng } from './random.js';
import { blockRanges, DenseRows, range, type RowSource } from './rows.js';

/**
 * D²(μ, ν) = 2 Σᵢ wᵢ cᵢ − Σᵢⱼ wᵢwⱼ Kᵢⱼ − E h(|Y − Y'|), with cᵢ = E_y h(|pᵢ − y|), Kᵢⱼ = h(|pᵢ − pⱼ|)
 * (Székely & Rizzo's energy distance for h(r) = r; squared MMD for h = −k, Gretton et al. 2012).
 */
export function discrepancyFromTerms(c: ArrayLike<number>, K: Float64Array, w: ArrayLike<number>, constant: number): number {
  const k = c.length;
  let lin = 0;
  let quad = 0;
  for (let i = 0; i < k; i++) {
    lin += w[i] * c[i];
    for (let j = 0; j < k; j++) quad += w[i] * w[j] * K[i * k + j];
  }
  return 2 * lin - quad - constant;
}

/**
 * Exact D² between two weighted point sets (weights are normalised; omitted → uniform).
 * Small sets only: it forms the full kernel matrices.
 */
export async function discrepancyBetween(
  backend: ComputeBackend,
  kernel: KernelSpec,
  x: Float32Array,
  nx: number,
  y: Float32Array,
  ny: number,
  d: number,
  wx?: ArrayLike<number>,
  wy?: ArrayLike<number>,
): Promise<number> {
  const ux = normalise(wx, nx);
  const uy = normalise(wy, ny);
  const kxy = await backend.kernelMatrix(x, nx, y, ny, d, kernel);
  const kxx = await backend.kernelMatrix(x, nx, x, nx, d, kernel);
  const kyy = await backend.kernelMatrix(y, ny, y, ny, d, kernel);
  let cross = 0;
  for (let i = 0; i < nx; i++) for (let j = 0; j < ny; j++) cross += ux[i] * uy[j] * kxy[i * ny + j];
  return 2 * cross - quadratic(kxx, ux) - quadratic(kyy, uy);
}

export interface ConstantTerm {
  /** E h(|Y − Y'|) over the empirical measure (V-statistic: pairs with i = j included). */
  value: number;
  /** True when computed over all pairs; false when estimated from a row sample. */
  exact: boolean;
  sampleRows: number;
  /**
   * Standard error of `value` (0 when exact). D² and its ratio to random inherit it, since every
   * other term is computed over all rows: a user should read D² as value ± this.
   */
  standardError: number;
}

export interface ConstantTermWithRows extends ConstantTerm {
  /** The rows the pairs were taken from: all rows (exact) or the sample. */
  reference: RowSource;
  /** Row indices of `reference` in the dataset (identity when exact). */
  referenceIndex: Int32Array;
  /** For each reference row i, the mean of h(|yᵢ − yⱼ|) over the reference rows j: cᵢ of item i as a candidate. */
  rowMeans: Float64Array;
}

export interface ConstantTermOptions {
  /** Compute over all N² pairs up to this many rows. Default 20,000. */
  exactMaxRows?: number;
  /** Otherwise estimate from this many sampled rows. Default: about 1e11 flops' worth, √(1e11/d), within 8,192..50,000. */
  sampleRows?: number;
  /** Rows per kernel call. Default 4,096. */
  blockRows?: number;
}

/**
 * The data's self term E h(|Y − Y'|), which does not depend on the representatives. Up to
 * `exactMaxRows` it is computed over all pairs; above, it is estimated without bias from a row
 * sample by the U-statistic, converted to the V-statistic of the full empirical measure:
 * V = ((N − 1)·U + h(0)) / N (derivation). The same pass yields, for every reference row, its
 * data term cᵢ = mean_j h(|yᵢ − yⱼ|), which the swap refinement uses to score every row as a
 * candidate at no extra cost.
 */
export async function constantTerm(
  rows: RowSource,
  backend: ComputeBackend,
  kernel: KernelSpec,
  rng: Rng,
  options: ConstantTermOptions = {},
): Promise<ConstantTermWithRows> {
  const n = rows.rows;
  const d = rows.cols;
  const exact = n <= (options.exactMaxRows ?? 20_000);
  const m = exact ? n : Math.min(options.sampleRows ?? defaultSampleRows(d), n);
  const referenceIndex = exact ? range(0, n) : rng.sample(n, m);
  const reference: RowSource = exact ? rows : new DenseRows(rows.gather(referenceIndex), m, d);
  const blockRows = options.blockRows ?? 4096;
  // h is symmetric, so each off-diagonal block (a, b) is computed once and gives the sums of
  // rows a (its column margin) and of rows b (its row margin): half the work of all blocks.
  const rowSums = new Float64Array(m);
  for (const [a, ca] of blockRanges(m, blockRows)) {
    const cBlock = reference.read(a, ca);
    for (const [b, cb] of blockRanges(m, blockRows, a)) {
      const sums = await backend.kernelSums(reference.read(b, cb), cb, cBlock, ca, d, kernel);
      for (let j = 0; j < ca; j++) rowSums[a + j] += sums.colSums[j];
      if (b !== a) for (let i = 0; i < cb; i++) rowSums[b + i] += sums.rowSums[i];
    }
  }
  let total = 0;
  for (const v of rowSums) total += v;
  const rowMeans = Float64Array.from(rowSums, (v) => v / m);
  if (exact) return { value: total / (n * n), exact, sampleRows: n, standardError: 0, reference, referenceIndex, rowMeans };
  const h0 = kernelAtZero(kernel);
  const u = (total - m * h0) / (m * (m - 1));
  // Var U ≈ 4σ₁²/m with σ₁² the variance of the row means (Hoeffding 1948, first-order term).
  let mean = 0;
  for (const v of rowMeans) mean += v / m;
  let variance = 0;
  for (const v of rowMeans) variance += (v - mean) ** 2 / (m - 1);
  const standardError = 2 * Math.sqrt(variance / m);
  return { value: ((n - 1) * u + h0) / n, exact, sampleRows: m, standardError, reference, referenceIndex, rowMeans };
}

/**
 * The sampled constant with the representatives as a control variate (own derivation; the standard
 * regression control variate, e.g. Glasserman 2003 §4.1). Its error comes mostly from which rows the
 * sample holds: the U-statistic U moves with (2/m) Σᵢ (c(yᵢ) − θ), c(y) = E h(|y − Y|). The
 * representatives give a function whose mean over all N rows is known exactly,
 * ĉ(y) = Σⱼ wⱼ h(|y − pⱼ|), with E_Y ĉ = Σⱼ wⱼ cⱼ (the full-data data terms): so
 *   U* = U − β (mean over the sample of ĉ − Σⱼ wⱼ cⱼ)
 * is unbiased for any fixed β, and with good representatives ĉ ≈ c, so most of the sample's error
 * cancels. β = 2 Cov(r, ĉ)/Var(ĉ) over the sample rows, r the sample row means (their projection);
 * standard error 2·sd(r − β/2 · ĉ)/√m, the first-order term as in constantTerm. `points` are the
 * representatives (count × d) in the selection space, `cFull` their data terms over all rows.
 * An exact constant is returned as it is.
 */
export async function controlledConstant(
  constant: ConstantTermWithRows,
  backend: ComputeBackend,
  kernel: KernelSpec,
  points: Float32Array,
  count: number,
  weights: ArrayLike<number>,
  cFull: ArrayLike<number>,
  n: number,
): Promise<ConstantTerm> {
  const { exact, sampleRows, value, standardError } = constant;
  if (exact) return { value, exact, sampleRows, standardError };
  const m = constant.reference.rows;
  const d = constant.reference.cols;
  const chat = new Float64Array(m);
  // Kernel blocks of at most 2²² values (32 MB of float64), whatever k is.
  const blockRows = Math.max(1, Math.min(4096, Math.floor(2 ** 22 / count)));
  for (const [start, rowsInBlock] of blockRanges(m, blockRows)) {
    const K = await backend.kernelMatrix(constant.reference.read(start, rowsInBlock), rowsInBlock, points, count, d, kernel);
    for (let i = 0; i < rowsInBlock; i++) {
      let s = 0;
      for (let j = 0; j < count; j++) s += weights[j] * K[i * count + j];
      chat[start + i] = s;
    }
  }
  const r = constant.rowMeans;
  let meanR = 0;
  let meanC = 0;
  for (let i = 0; i < m; i++) {
    meanR += r[i] / m;
    meanC += chat[i] / m;
  }
  let cov = 0;
  let varC = 0;
  for (let i = 0; i < m; i++) {
    cov += (r[i] - meanR) * (chat[i] - meanC);
    varC += (chat[i] - meanC) ** 2;
  }
  const beta = varC > 0 ? (2 * cov) / varC : 0;
  let fullC = 0;
  for (let j = 0; j < count; j++) fullC += weights[j] * cFull[j];
  // value = ((N − 1)·U + h(0)) / N (see constantTerm): the correction to U, scaled the same way.
  const corrected = value - ((n - 1) / n) * beta * (meanC - fullC);
  let residual = 0;
  for (let i = 0; i < m; i++) residual += (r[i] - meanR - (beta / 2) * (chat[i] - meanC)) ** 2 / (m - 1);
  return { value: corrected, exact, sampleRows, standardError: 2 * Math.sqrt(residual / m) };
}

/**
 * The sample's m²·d/2 kernel work is held near 1e11 flops (under a second here): the standard
 * error falls as 1/√m, so narrow data gets a larger sample for the same time.
 */
function defaultSampleRows(d: number): number {
  return Math.min(50_000, Math.max(8192, Math.round(Math.sqrt(1e11 / d))));
}

/** cᵢ = E_y h(|pᵢ − y|) over all rows, streamed in blocks. */
export async function dataTermMeans(
  rows: RowSource,
  backend: ComputeBackend,
  kernel: KernelSpec,
  points: Float32Array,
  k: number,
  blockRows = 8192,
): Promise<Float64Array> {
  const c = new Float64Array(k);
  for (const [start, count] of blockRanges(rows.rows, blockRows)) {
    const sums = await backend.kernelColumnSums(rows.read(start, count), count, points, k, rows.cols, kernel);
    for (let j = 0; j < k; j++) c[j] += sums[j];
  }
  for (let j = 0; j < k; j++) c[j] /= rows.rows;
  return c;
}

export function quadratic(K: Float64Array, w: ArrayLike<number>): number {
  const k = w.length;
  let q = 0;
  for (let i = 0; i < k; i++) {
    let row = 0;
    for (let j = 0; j < k; j++) row += K[i * k + j] * w[j];
    q += w[i] * row;
  }
  return q;
}

function normalise(w: ArrayLike<number> | undefined, n: number): Float64Array {
  const out = new Float64Array(n);
  if (!w) return out.fill(1 / n);
  let sum = 0;
  for (let i = 0; i < n; i++) sum += w[i];
  for (let i = 0; i < n; i++) out[i] = w[i] / sum;
  return out;
}

import { Rng } from '../core/random.js';

/**
 * The leading principal axes of a small row-major matrix (a sample of a dataset, for the report's
 * scatter plot), by power iteration with deflation. Plain TypeScript and float64: a couple of
 * thousand rows need no kernels, and the d × d covariance matrix is never formed: each step is
 * C·v = (1/n) Σᵢ zᵢ (zᵢ·v) over the centred, optionally standardized rows zᵢ, O(n·d) time and
 * O(n·d) memory for the rows rather than O(d²).
 */
export interface PrincipalAxes {
  cols: number;
  /** Column means of the rows. */
  mean: Float64Array;
  /** Per-column divisor applied after centring: the column's standard deviation when standardized, else 1. */
  scale: Float64Array;
  /** Unit axes, largest variance first; each sign is fixed so that its largest-magnitude entry is positive. */
  axes: Float64Array[];
  /** Variance of the (scaled) rows along each axis: the covariance eigenvalue, divisor n. */
  variances: number[];
  /** Sum of the (scaled) column variances: the trace of the covariance, so variances[i] / totalVariance is the share explained. */
  totalVariance: number;
  /** Power-iteration steps each axis took. */
  iterations: number[];
}

export interface PrincipalAxesOptions {
  /** How many axes, at most cols. Default 2. */
  components?: number;
  /** Divide each centred column by its standard deviation first (columns with none keep 1). Default false. */
  standardize?: boolean;
  /** Step cap per axis. Default 1000. */
  maxIterations?: number;
  /** Stop once 1 − |v·v'| between consecutive iterates falls below this. Default 1e-12. */
  tolerance?: number;
  /** Seed of the start vectors (the result is deterministic for a given seed). Default 0. */
  seed?: number;
}

/** Leading principal axes of `rows` × `cols` values, row-major (see PrincipalAxes). */
export function principalAxes(data: ArrayLike<number>, rows: number, cols: number, options: PrincipalAxesOptions = {}): PrincipalAxes {
  if (!Number.isInteger(rows) || rows < 1 || !Number.isInteger(cols) || cols < 1 || data.length < rows * cols) {
    throw new RangeError(`principalAxes needs rows, cols ≥ 1 and rows·cols values (rows ${rows}, cols ${cols}, values ${data.length})`);
  }
  const components = Math.min(options.components ?? 2, cols);
  const maxIterations = options.maxIterations ?? 1000;
  const tolerance = options.tolerance ?? 1e-12;

  const mean = new Float64Array(cols);
  for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) mean[j] += data[i * cols + j];
  for (let j = 0; j < cols; j++) mean[j] /= rows;

  const scale = new Float64Array(cols).fill(1);
  const variance = new Float64Array(cols);
  for (let i = 0; i < rows; i++) {
    for (let j = 0; j < cols; j++) {
      const c = data[i * cols + j] - mean[j];
      variance[j] += c * c;
    }
  }
  for (let j = 0; j < cols; j++) variance[j] /= rows;
  let totalVariance = 0;
  for (let j = 0; j < cols; j++) {
    if (options.standardize && variance[j] > 0) {
      scale[j] = Math.sqrt(variance[j]);
      totalVariance += 1;
    } else {
      totalVariance += variance[j];
    }
  }

  // The centred, scaled rows, once: n·d float64 (2,000 × 1,024 is 16 MB), read on every step.
  const z = new Float64Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) z[i * cols + j] = (data[i * cols + j] - mean[j]) / scale[j];

  const covTimes = (v: Float64Array, out: Float64Array): void => {
    out.fill(0);
    for (let i = 0; i < rows; i++) {
      const base = i * cols;
      let dot = 0;
      for (let j = 0; j < cols; j++) dot += z[base + j] * v[j];
      if (dot === 0) continue;
      for (let j = 0; j < cols; j++) out[j] += z[base + j] * dot;
    }
    for (let j = 0; j < cols; j++) out[j] /= rows;
  };

  const rng = new Rng(options.seed ?? 0);
  const axes: Float64Array[] = [];
  const variances: number[] = [];
  const iterations: number[] = [];
  const w = new Float64Array(cols);
  for (let c = 0; c < components; c++) {
    let v: Float64Array = new Float64Array(cols);
    for (let j = 0; j < cols; j++) v[j] = rng.normal();
    orthogonalize(v, axes);
    if (!normalize(v)) v = basisVectorOrthogonalTo(axes, cols);
    let steps = 0;
    let degenerate = false;
    while (steps < maxIterations) {
      steps++;
      covTimes(v, w);
      // Deflation: the step stays in the complement of the axes already found.
      orthogonalize(w, axes);
      let norm = 0;
      for (let j = 0; j < cols; j++) norm += w[j] * w[j];
      norm = Math.sqrt(norm);
      if (!(norm > 1e-300)) {
        // No variance left in the complement: any unit vector there is an axis (with variance 0).
        degenerate = true;
        break;
      }
      let dot = 0;
      for (let j = 0; j < cols; j++) {
        w[j] /= norm;
        dot += w[j] * v[j];
      }
      v.set(w);
      if (1 - Math.abs(dot) < tolerance) break;
    }
    if (degenerate) {
      orthogonalize(v, axes);
      if (!normalize(v)) v = basisVectorOrthogonalTo(axes, cols);
    }
    fixSign(v);
    covTimes(v, w);
    let rayleigh = 0;
    for (let j = 0; j < cols; j++) rayleigh += v[j] * w[j];
    axes.push(v);
    variances.push(Math.max(0, rayleigh));
    iterations.push(steps);
  }
  return { cols, mean, scale, axes, variances, totalVariance, iterations };
}

/** Coordinates of each row on the axes: rows × axes.length values, row-major. */
export function projectRows(data: ArrayLike<number>, rows: number, pa: PrincipalAxes): Float64Array {
  const { cols, mean, scale, axes } = pa;
  if (data.length < rows * cols) throw new RangeError(`projectRows needs rows·cols values (rows ${rows}, cols ${cols}, values ${data.length})`);
  const m = axes.length;
  const out = new Float64Array(rows * m);
  for (let i = 0; i < rows; i++) {
    for (let a = 0; a < m; a++) {
      const axis = axes[a];
      let s = 0;
      for (let j = 0; j < cols; j++) s += ((data[i * cols + j] - mean[j]) / scale[j]) * axis[j];
      out[i * m + a] = s;
    }
  }
  return out;
}

function orthogonalize(v: Float64Array, basis: Float64Array[]): void {
  // Twice: one Gram–Schmidt pass loses orthogonality when v is nearly inside the span.
  for (let pass = 0; pass < 2; pass++) {
    for (const b of basis) {
      let dot = 0;
      for (let j = 0; j < v.length; j++) dot += v[j] * b[j];
      for (let j = 0; j < v.length; j++) v[j] -= dot * b[j];
    }
  }
}

function normalize(v: Float64Array): boolean {
  let norm = 0;
  for (let j = 0; j < v.length; j++) norm += v[j] * v[j];
  norm = Math.sqrt(norm);
  if (!(norm > 1e-150)) return false;
  for (let j = 0; j < v.length; j++) v[j] /= norm;
  return true;
}

function basisVectorOrthogonalTo(basis: Float64Array[], cols: number): Float64Array {
  for (let e = 0; e < cols; e++) {
    const v = new Float64Array(cols);
    v[e] = 1;
    orthogonalize(v, basis);
    if (normalize(v)) return v;
  }
  throw new RangeError('no unit vector is orthogonal to the axes found');
}

function fixSign(v: Float64Array): void {
  let at = 0;
  for (let j = 1; j < v.length; j++) if (Math.abs(v[j]) > Math.abs(v[at])) at = j;
  if (v[at] < 0) for (let j = 0; j < v.length; j++) v[j] = -v[j];
}

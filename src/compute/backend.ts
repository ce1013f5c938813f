import type { KernelSpec } from './kernel-spec.js';

/**
 * The heavy kernels of the method, behind one interface. Matrices are float32, row-major:
 * x is n×d (data rows), p is k×d (points). Every implementation passes test/compute-conformance.test.ts.
 *
 * Outputs are reduced inside the kernel (row minima, column sums, the gradient's matrix product)
 * so that nothing of size n×k is returned except by `sqDistances` and `kernelMatrix`, which callers
 * use on small blocks only.
 */
export interface ComputeBackend {
  readonly name: string;

  /** out[i·k + j] = |x_i − p_j|², clamped at 0 (n×k). */
  sqDistances(x: Float32Array, n: number, p: Float32Array, k: number, d: number): Promise<Float32Array>;

  /** out[i·nb + j] = h(|a_i − b_j|) (na×nb), float64 for the quadratic forms built from it. */
  kernelMatrix(a: Float32Array, na: number, b: Float32Array, nb: number, d: number, kernel: KernelSpec): Promise<Float64Array>;

  /** kernelMatrix with `a` as prepared rows [x, |x|², 1] (na × (d + 2), see prepareRows). */
  kernelMatrixPrepared(aAug: Float32Array, na: number, b: Float32Array, nb: number, d: number, kernel: KernelSpec): Promise<Float64Array>;

  /** out[j] = Σ_i h(|x_i − c_j|) over the n rows (m values). */
  kernelColumnSums(x: Float32Array, n: number, c: Float32Array, m: number, d: number, kernel: KernelSpec): Promise<Float64Array>;

  /**
   * Both margins of the kernel block: rowSums[i] = Σ_j h(|x_i − c_j|) (n values) and
   * colSums[j] = Σ_i h(|x_i − c_j|) (m values). One pass over a block serves both of its
   * symmetric halves when summing h over all pairs of a dataset.
   */
  kernelSums(x: Float32Array, n: number, c: Float32Array, m: number, d: number, kernel: KernelSpec): Promise<KernelSums>;

  /**
   * Minibatch statistics of the data term for each point j, with g(s) = h'(r)/r:
   *   hSum[j] = Σ_i h(|x_i − p_j|),  gSum[j] = Σ_i g_ij,  gx[j·d + t] = Σ_i g_ij x_it.
   * The gradient of Σ_i h(|x_i − p_j|) in p_j is then gSum[j]·p_j − gx[j,:].
   */
  dataTerm(x: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec): Promise<DataTermStats>;

  /**
   * dataTerm on prepared rows: `xAug` holds n rows [x, |x|², 1] (n × (d + 2), see prepareRows),
   * built once for rows used many times, such as the descent's shuffled copy.
   */
  dataTermPrepared(xAug: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec): Promise<DataTermStats>;

  /** Nearest point of each row: index and squared distance. With a kernel, also the column sums of h. */
  assign(x: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel?: KernelSpec): Promise<Assignment>;

  /** For each point j, the m rows of x nearest to it (ascending distance; ties by lower row): k×m. m ≤ n. */
  nearestRows(x: Float32Array, n: number, p: Float32Array, k: number, d: number, m: number): Promise<NearestRows>;

  /** C = op(A)·op(B) with op = transpose when asked; A is aRows×aCols, B is bRows×bCols as stored. */
  gemm(a: Float32Array, aRows: number, aCols: number, b: Float32Array, bRows: number, bCols: number, transA: boolean, transB: boolean): Promise<Float32Array>;

  /** Releases native resources. The backend is unusable afterwards. */
  dispose(): Promise<void>;
}

export interface KernelSums {
  rowSums: Float64Array;
  colSums: Float64Array;
}

export interface DataTermStats {
  hSum: Float64Array;
  gSum: Float64Array;
  gx: Float32Array;
}

export interface Assignment {
  index: Int32Array;
  sqDist: Float32Array;
  hSum: Float64Array | null;
}

export interface NearestRows {
  index: Int32Array;
  sqDist: Float32Array;
}

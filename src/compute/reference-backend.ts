import type { Assignment, ComputeBackend, DataTermStats, KernelSums, NearestRows } from './backend.js';
import { kernelG, kernelH, type KernelSpec } from './kernel-spec.js';
import { unprepareRows } from './prepared-rows.js';

/**
 * Plain TypeScript kernels, computed in float64 with direct differences (no |x|²+|p|²−2x·p
 * cancellation). They are the reference the ONNX graphs are checked against, and the fast path
 * for tiny shapes where a native call's overhead dominates.
 */
export class ReferenceBackend implements ComputeBackend {
  readonly name = 'reference';

  async sqDistances(x: Float32Array, n: number, p: Float32Array, k: number, d: number): Promise<Float32Array> {
    return sqDistancesSync(x, n, p, k, d);
  }

  async kernelMatrix(a: Float32Array, na: number, b: Float32Array, nb: number, d: number, kernel: KernelSpec): Promise<Float64Array> {
    const out = new Float64Array(na * nb);
    for (let i = 0; i < na; i++) {
      for (let j = 0; j < nb; j++) out[i * nb + j] = kernelH(kernel, sq(a, i, b, j, d));
    }
    return out;
  }

  async kernelMatrixPrepared(aAug: Float32Array, na: number, b: Float32Array, nb: number, d: number, kernel: KernelSpec): Promise<Float64Array> {
    return this.kernelMatrix(unprepareRows(aAug, na, d), na, b, nb, d, kernel);
  }

  async kernelColumnSums(x: Float32Array, n: number, c: Float32Array, m: number, d: number, kernel: KernelSpec): Promise<Float64Array> {
    const out = new Float64Array(m);
    for (let i = 0; i < n; i++) {
      for (let j = 0; j < m; j++) out[j] += kernelH(kernel, sq(x, i, c, j, d));
    }
    return out;
  }

  async kernelSums(x: Float32Array, n: number, c: Float32Array, m: number, d: number, kernel: KernelSpec): Promise<KernelSums> {
    const rowSums = new Float64Array(n);
    const colSums = new Float64Array(m);
    for (let i = 0; i < n; i++) {
      for (let j = 0; j < m; j++) {
        const h = kernelH(kernel, sq(x, i, c, j, d));
        rowSums[i] += h;
        colSums[j] += h;
      }
    }
    return { rowSums, colSums };
  }

  async dataTerm(x: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec): Promise<DataTermStats> {
    const hSum = new Float64Array(k);
    const gSum = new Float64Array(k);
    const gx64 = new Float64Array(k * d);
    for (let i = 0; i < n; i++) {
      for (let j = 0; j < k; j++) {
        const s = sq(x, i, p, j, d);
        const g = kernelG(kernel, s);
        hSum[j] += kernelH(kernel, s);
        gSum[j] += g;
        const row = j * d;
        const xi = i * d;
        for (let t = 0; t < d; t++) gx64[row + t] += g * x[xi + t];
      }
    }
    return { hSum, gSum, gx: Float32Array.from(gx64) };
  }

  async dataTermPrepared(xAug: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec): Promise<DataTermStats> {
    return this.dataTerm(unprepareRows(xAug, n, d), n, p, k, d, kernel);
  }

  async assign(x: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel?: KernelSpec): Promise<Assignment> {
    const index = new Int32Array(n);
    const sqDist = new Float32Array(n);
    const hSum = kernel ? new Float64Array(k) : null;
    for (let i = 0; i < n; i++) {
      let best = Infinity;
      let arg = 0;
      for (let j = 0; j < k; j++) {
        const s = sq(x, i, p, j, d);
        if (s < best) {
          best = s;
          arg = j;
        }
        if (hSum && kernel) hSum[j] += kernelH(kernel, s);
      }
      index[i] = arg;
      sqDist[i] = best;
    }
    return { index, sqDist, hSum };
  }

  async nearestRows(x: Float32Array, n: number, p: Float32Array, k: number, d: number, m: number): Promise<NearestRows> {
    const index = new Int32Array(k * m);
    const sqDist = new Float32Array(k * m);
    const order = new Int32Array(n);
    const dist = new Float64Array(n);
    for (let j = 0; j < k; j++) {
      for (let i = 0; i < n; i++) {
        dist[i] = sq(x, i, p, j, d);
        order[i] = i;
      }
      const sorted = Array.from(order).sort((u, v) => dist[u] - dist[v] || u - v);
      for (let r = 0; r < m; r++) {
        index[j * m + r] = sorted[r];
        sqDist[j * m + r] = dist[sorted[r]];
      }
    }
    return { index, sqDist };
  }

  async gemm(a: Float32Array, aRows: number, aCols: number, b: Float32Array, bRows: number, bCols: number, transA: boolean, transB: boolean): Promise<Float32Array> {
    const m = transA ? aCols : aRows;
    const inner = transA ? aRows : aCols;
    const n = transB ? bRows : bCols;
    const out = new Float32Array(m * n);
    for (let i = 0; i < m; i++) {
      for (let j = 0; j < n; j++) {
        let acc = 0;
        for (let t = 0; t < inner; t++) {
          const av = transA ? a[t * aCols + i] : a[i * aCols + t];
          const bv = transB ? b[j * bCols + t] : b[t * bCols + j];
          acc += av * bv;
        }
        out[i * n + j] = acc;
      }
    }
    return out;
  }

  async dispose(): Promise<void> {}
}

/** |a_i − b_j|² by direct differences, in float64. */
function sq(a: Float32Array, i: number, b: Float32Array, j: number, d: number): number {
  let acc = 0;
  const ai = i * d;
  const bj = j * d;
  for (let t = 0; t < d; t++) {
    const diff = a[ai + t] - b[bj + t];
    acc += diff * diff;
  }
  return acc;
}

export function sqDistancesSync(x: Float32Array, n: number, p: Float32Array, k: number, d: number): Float32Array {
  const out = new Float32Array(n * k);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j < k; j++) out[i * k + j] = sq(x, i, p, j, d);
  }
  return out;
}

import { Matrix, solve } from 'ml-matrix';

/**
 * Weights of a fixed set of points. For fixed points p, the discrepancy is, up to a constant,
 *
 *   f(w) = 2 cᵀw − wᵀK w,   c_i = E_y h(|p_i − y|),  K_ij = h(|p_i − p_j|),
 *
 * a convex quadratic on the probability simplex: h is conditionally negative definite
 * (Micchelli 1986) for the energy kernel, and −h is positive definite for the Gaussian, so −K is
 * positive semidefinite on {v : Σv = 0}. We minimise it by accelerated projected gradient (FISTA,
 * Beck & Teboulle 2009, with gradient restarts) using the exact Euclidean projection onto the
 * simplex of Duchi et al. (ICML 2008), stop on the Frank–Wolfe duality gap, which bounds
 * f(w) − f* from above, and finish with an exact solve on the support found. Weights are never
 * negative.
 */

export interface WeightSolution {
  weights: Float64Array;
  /** f(w) = 2cᵀw − wᵀKw at the returned weights. */
  objective: number;
  /** Frank–Wolfe gap at the returned weights: an upper bound on f(w) − min f. */
  gap: number;
  iterations: number;
  converged: boolean;
}

export interface WeightSolveOptions {
  /** Stop when the duality gap (≥ f(w) − min f) is below tol·max|cᵢ|. Default 1e-7. */
  tol?: number;
  /** Iteration cap. Default 5000. */
  maxIterations?: number;
  /** Starting weights (projected onto the simplex). Default uniform. */
  start?: ArrayLike<number>;
}

/** Euclidean projection of v onto {w ≥ 0, Σw = 1} (Duchi et al. 2008, Fig. 1), in place. */
export function projectToSimplex(v: Float64Array): Float64Array {
  const n = v.length;
  const u = Float64Array.from(v).sort().reverse();
  let cumulative = 0;
  let theta = 0;
  for (let j = 0; j < n; j++) {
    cumulative += u[j];
    const t = (cumulative - 1) / (j + 1);
    if (u[j] - t > 0) theta = t;
  }
  for (let i = 0; i < n; i++) v[i] = Math.max(v[i] - theta, 0);
  return v;
}

/** f(w) = 2cᵀw − wᵀKw and its gradient 2c − 2Kw (K symmetric, k×k row-major). */
export function weightObjective(c: ArrayLike<number>, K: Float64Array, w: ArrayLike<number>, grad?: Float64Array): number {
  const k = c.length;
  let lin = 0;
  let quad = 0;
  for (let i = 0; i < k; i++) {
    let kw = 0;
    const row = i * k;
    for (let j = 0; j < k; j++) kw += K[row + j] * w[j];
    lin += c[i] * w[i];
    quad += w[i] * kw;
    if (grad) grad[i] = 2 * c[i] - 2 * kw;
  }
  return 2 * lin - quad;
}

export function solveWeights(c: ArrayLike<number>, K: Float64Array, options: WeightSolveOptions = {}): WeightSolution {
  const k = c.length;
  const tol = options.tol ?? 1e-7;
  const maxIterations = options.maxIterations ?? 5000;
  let w = projectToSimplex(options.start ? Float64Array.from(options.start) : new Float64Array(k).fill(1 / k));
  if (k === 1) return { weights: w, objective: weightObjective(c, K, w), gap: 0, iterations: 0, converged: true };

  // The row-sum bound 2·max_i Σ_j |K_ij| on the gradient's Lipschitz constant is often k times
  // too large, so L starts below it and backtracking (Beck & Teboulle 2009, §4) raises it as needed.
  let bound = 0;
  let scale = 0;
  for (let i = 0; i < k; i++) {
    let rowSum = 0;
    for (let j = 0; j < k; j++) rowSum += Math.abs(K[i * k + j]);
    bound = Math.max(bound, 2 * rowSum);
    scale = Math.max(scale, Math.abs(c[i]));
  }
  let L = Math.max(bound / k, 1e-300);
  scale = Math.max(scale, 1e-300);

  const grad = new Float64Array(k);
  const gy = new Float64Array(k);
  let y = Float64Array.from(w);
  let t = 1;
  let f = weightObjective(c, K, w, grad);
  let gap = dualityGap(w, grad);
  let it = 0;
  const next = new Float64Array(k);
  for (; it < maxIterations && gap > tol * scale; it++) {
    const fy = weightObjective(c, K, y, gy);
    let fNext = 0;
    for (let tries = 0; tries < 60; tries++) {
      for (let i = 0; i < k; i++) next[i] = y[i] - gy[i] / L;
      projectToSimplex(next);
      fNext = weightObjective(c, K, next);
      let lin = 0;
      let sq = 0;
      for (let i = 0; i < k; i++) {
        const diff = next[i] - y[i];
        lin += gy[i] * diff;
        sq += diff * diff;
      }
      if (fNext <= fy + lin + (L / 2) * sq + 1e-15 * Math.abs(fy)) break;
      L *= 2;
    }
    if (fNext > f) {
      // Restart the momentum when it overshoots (O'Donoghue & Candès 2015).
      y = Float64Array.from(w);
      t = 1;
      continue;
    }
    const tNext = (1 + Math.sqrt(1 + 4 * t * t)) / 2;
    for (let i = 0; i < k; i++) y[i] = next[i] + ((t - 1) / tNext) * (next[i] - w[i]);
    t = tNext;
    w = Float64Array.from(next);
    f = weightObjective(c, K, w, grad);
    gap = dualityGap(w, grad);
    L *= 0.95;
  }
  if (gap > tol * scale) {
    const polished = polishOnSupport(c, K, w);
    if (polished) {
      const gPol = new Float64Array(k);
      const fPol = weightObjective(c, K, polished, gPol);
      const gapPol = dualityGap(polished, gPol);
      if (fPol <= f + 1e-12 * Math.abs(f) && gapPol < gap) {
        w = polished;
        f = fPol;
        gap = gapPol;
      }
    }
  }
  return { weights: w, objective: f, gap, iterations: it, converged: gap <= tol * scale };
}

/**
 * First-order methods approach the optimum slowly once the support is found; on the support the
 * problem is an equality-constrained quadratic, solved exactly from its KKT system
 *   [−K_SS 1; 1ᵀ 0] [w; μ] = [−c_S; 1]
 * (derivation: stationarity of 2cᵀw − wᵀKw + μ'(1 − Σw)). Indices that come out negative leave
 * the support and the system is solved again. Returns null when the system is singular.
 */
function polishOnSupport(c: ArrayLike<number>, K: Float64Array, w: Float64Array): Float64Array | null {
  const k = w.length;
  const max = Math.max(...w);
  let support = Array.from(w.keys()).filter((i) => w[i] > 1e-9 * max);
  for (let round = 0; round < 10 && support.length > 0; round++) {
    const m = support.length;
    const A = new Matrix(m + 1, m + 1);
    const b = new Matrix(m + 1, 1);
    for (let r = 0; r < m; r++) {
      for (let q = 0; q < m; q++) A.set(r, q, -K[support[r] * k + support[q]]);
      A.set(r, m, 1);
      A.set(m, r, 1);
      b.set(r, 0, -c[support[r]]);
    }
    b.set(m, 0, 1);
    let x: Matrix;
    try {
      x = solve(A, b);
    } catch {
      return null;
    }
    const out = new Float64Array(k);
    let ok = true;
    support.forEach((i, r) => {
      const v = x.get(r, 0);
      if (!Number.isFinite(v)) ok = false;
      out[i] = v;
    });
    if (!ok) return null;
    const negative = support.filter((i) => out[i] < 0);
    if (negative.length === 0) return out;
    support = support.filter((i) => out[i] >= 0);
  }
  return null;
}

/** ∇fᵀ(w − e_j) with j = argmin ∇f: the Frank–Wolfe gap, ≥ f(w) − f* for convex f. */
function dualityGap(w: Float64Array, grad: Float64Array): number {
  let min = Infinity;
  let dot = 0;
  for (let i = 0; i < w.length; i++) {
    dot += grad[i] * w[i];
    if (grad[i] < min) min = grad[i];
  }
  return Math.max(dot - min, 0);
}

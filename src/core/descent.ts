import type { ComputeBackend, DataTermStats } from '../compute/backend.js';
import { prepareRows } from '../compute/prepared-rows.js';
import { kernelG, kernelH, type KernelSpec } from '../compute/kernel-spec.js';
import { createOptimizerState, optimizerStep, type OptimizerKind, type OptimizerState } from './optimizer.js';
import { Rng } from './random.js';
import { range, type RowSource } from './rows.js';
import { dataTermMeans } from './discrepancy.js';
import { solveWeights } from './weights.js';

export interface DescentOptions {
  optimizer: OptimizerKind;
  batchSize: number;
  maxIterations: number;
  /** Wall-clock budget in ms for the descent; null = none. */
  timeBudgetMs: number | null;
  /** Initial step in units of the data scale s (Adam: per coordinate, divided by √d). */
  learningRate: number;
  /** The step decays geometrically to this fraction of the initial one at the end of the budget. */
  finalLearningRateFraction: number;
  /** Stop when the running loss improved by less than this fraction of its initial value over a window. 0 = never. */
  plateauTolerance: number;
  /** Iterations per plateau window. */
  plateauWindow: number;
  /** Re-solve the weights every this many iterations (optimized weights only). */
  weightEvery: number;
  optimizeWeights: boolean;
  /** Fraction of the budget after which the weights are optimized along with the points. */
  weightsFrom: number;
}

export interface DescentState {
  points: Float32Array;
  weights: Float64Array;
  optimizer: OptimizerState;
  iteration: number;
  /** Running (exponential moving average) estimate of D², and of cᵢ for the weight solver. */
  lossEma: number | null;
  cEma: Float64Array | null;
  initialLoss: number | null;
  windowStartLoss: number | null;
  elapsedMs: number;
  gradScale: number | null;
  /** Generator state the row permutation is drawn from, so a resumed descent sees the same one. */
  shuffleState: number[];
}

export interface DescentProgress {
  iteration: number;
  maxIterations: number;
  loss: number;
  elapsedMs: number;
  /** Fraction of the budget (iterations or time, whichever binds) used so far. */
  fraction: number;
}

export type StopReason = 'iterations' | 'time' | 'plateau' | 'cancelled';

export interface DescentResult {
  state: DescentState;
  stopReason: StopReason;
  /** Running loss every `traceEvery` iterations: [iteration, loss]. */
  trace: Array<[number, number]>;
}

export interface DescentContext {
  rows: RowSource;
  backend: ComputeBackend;
  kernel: KernelSpec;
  rng: Rng;
  /** Data scale s (median pairwise distance). */
  scale: number;
  /** E h(|Y − Y'|) estimate, so the reported loss is a D² estimate. */
  constant: number;
  /** Rows for the data term of the weight solver (a sample or all rows); default: the minibatch average. */
  weightRows?: RowSource;
  /** Points that count as representatives but never move (1 = fixed); room for already-annotated items. */
  frozen?: Uint8Array;
  /** A pull of points towards earlier positions (stable re-selection); added to the loss. */
  anchors?: DescentAnchors;
  now?: () => number;
  onProgress?: (p: DescentProgress) => void;
  /** Called after each iteration; return true to stop (cancellation). */
  shouldStop?: () => boolean;
  /**
   * Called at the end of an iteration once `checkpointEveryMs` has passed since the last call, with
   * the live state, the generator state and the trace so far: a caller that stores a copy can
   * resume the descent exactly (see DescentCheckpoint). Awaited, so a slow store slows the descent.
   */
  onCheckpoint?: (state: DescentState, rngState: number[], trace: Array<[number, number]>) => Promise<void> | void;
  checkpointEveryMs?: number;
  /** Trace entries of an earlier attempt this descent continues (from a checkpoint). */
  initialTrace?: Array<[number, number]>;
  /**
   * Bytes the descent may hold in a copy of the rows (the shuffled prepared copy, or the prepared
   * full batch). Without room for it, minibatches are gathered anew each iteration. Default: no limit.
   */
  maxCopyBytes?: number;
}

/**
 * The stability penalty R(p) = coefficient · Σ_{j active} min(1, |pⱼ − qⱼ|² / ρⱼ²): quadratic near
 * the earlier position qⱼ, flat (cost `coefficient`) beyond the radius ρⱼ, so a point the data pulls
 * elsewhere strongly enough can still leave. Its gradient is coefficient · 2(pⱼ − qⱼ)/ρⱼ² inside.
 */
export interface DescentAnchors {
  /** k×d earlier positions, in the selection space (rows of inactive points are ignored). */
  points: Float32Array;
  /** 1 = point j has an earlier position. */
  active: Uint8Array;
  coefficient: number;
  /** ρⱼ per point (> 0 for active points). */
  radius: Float64Array;
}

/** R(p) of DescentAnchors, adding its gradient into grad when given. */
export function anchorPenalty(anchors: DescentAnchors, points: Float32Array, d: number, grad?: Float64Array): number {
  const { coefficient } = anchors;
  let total = 0;
  for (let j = 0; j < anchors.active.length; j++) {
    if (!anchors.active[j]) continue;
    const r2 = anchors.radius[j] * anchors.radius[j];
    let sq = 0;
    for (let t = 0; t < d; t++) sq += (points[j * d + t] - anchors.points[j * d + t]) ** 2;
    if (sq >= r2) {
      total += coefficient;
      continue;
    }
    total += (coefficient * sq) / r2;
    if (grad) for (let t = 0; t < d; t++) grad[j * d + t] += (2 * coefficient * (points[j * d + t] - anchors.points[j * d + t])) / r2;
  }
  return total;
}

export function initialDescentState(points: Float32Array, k: number, kind: OptimizerKind, rng: Rng): DescentState {
  const shuffleState = new Rng(rng.nextUint32()).state();
  return {
    shuffleState,
    points,
    weights: new Float64Array(k).fill(1 / k),
    optimizer: createOptimizerState(kind, points.length),
    iteration: 0,
    lossEma: null,
    cEma: null,
    initialLoss: null,
    windowStartLoss: null,
    elapsedMs: 0,
    gradScale: null,
  };
}

/** Largest dataset (values) for which the descent keeps one shuffled copy of the rows: 1 GiB. */
const SHUFFLED_COPY_MAX_VALUES = 2 ** 28;

/**
 * A minibatch of rows read from a file is made of blocks of consecutive rows of about this many
 * bytes (one page; at least one row), one read each: B scattered single-row reads cost more.
 */
const FILE_BLOCK_BYTES = 4096;

/**
 * Rows of B/b random blocks of b consecutive rows (b = rows per FILE_BLOCK_BYTES), blocks on a
 * grid and drawn without replacement: every row is in the batch with the same probability, so the
 * gradient stays unbiased; rows of one block are correlated when the file is ordered (e.g. by
 * label), which adds variance, not bias. Returns the row indices (fewer than B when the last,
 * shorter block is drawn).
 */
export function blockMinibatch(n: number, d: number, B: number, rng: Rng): Int32Array {
  const b = Math.max(1, Math.floor(FILE_BLOCK_BYTES / (4 * d)));
  const blocks = Math.ceil(n / b);
  const picked = rng.sample(blocks, Math.min(blocks, Math.max(1, Math.round(B / b))));
  const out: number[] = [];
  for (const block of picked) for (let r = block * b; r < Math.min(n, block * b + b); r++) out.push(r);
  return Int32Array.from(out);
}

/**
 * Minibatch stochastic descent on D²(μ, ν) over the k points. The data term's gradient
 * 2wⱼ E_y g(|pⱼ − y|²)(pⱼ − y) is estimated without bias from a minibatch of B rows; the self
 * term −Σ wᵢwⱼ h(|pᵢ − pⱼ|) is exact (k×k). The state can be saved and resumed at any iteration.
 */
export async function runDescent(ctx: DescentContext, state: DescentState, o: DescentOptions): Promise<DescentResult> {
  const { rows, backend, kernel, rng } = ctx;
  const n = rows.rows;
  const d = rows.cols;
  const k = state.weights.length;
  const B = Math.min(o.batchSize, n);
  const now = ctx.now ?? (() => performance.now());
  const started = now() - state.elapsedMs;
  const trace: Array<[number, number]> = ctx.initialTrace ? [...ctx.initialTrace] : [];
  let lastCheckpoint = now();
  const traceEvery = Math.max(1, Math.floor(o.maxIterations / 200));
  const lr0 = state.optimizer.kind === 'adam' ? (o.learningRate * ctx.scale) / Math.sqrt(d) : o.learningRate * ctx.scale;
  const emaRate = 2 / (Math.min(o.plateauWindow, 50) + 1);
  const grad = new Float64Array(k * d);
  // No early stop in the first half, nor before the weights have had their share of the budget.
  const plateauFrom = o.optimizeWeights ? Math.max(0.5, o.weightsFrom + 0.15) : 0.5;
  let stopReason: StopReason = 'iterations';
  let fullBatch: Float32Array | undefined;
  let batchBuffer: Float32Array | undefined;
  let shuffled: Float32Array | undefined;
  let anchorGrad: Float64Array | undefined;
  // The shuffled copy (or the full batch) in prepared form: n × (d + 2) float32.
  const copyFits = n * (d + 2) * 4 <= (ctx.maxCopyBytes ?? Infinity);
  // The copy pays off only when the descent reads about every row at least once: building it
  // costs a pass over all n rows (at 1M × 128, more than 150 iterations of 2,048 rows).
  const copyPays = o.maxIterations * B >= n;

  while (state.iteration < o.maxIterations) {
    const elapsed = now() - started;
    const fraction = Math.max(state.iteration / o.maxIterations, o.timeBudgetMs ? elapsed / o.timeBudgetMs : 0);
    if (o.timeBudgetMs !== null && elapsed >= o.timeBudgetMs) {
      stopReason = 'time';
      break;
    }
    let stats: DataTermStats;
    // Rows in this step's minibatch (B, or the rows of the blocks drawn from a file).
    let batchRows = B;
    if (B === n && copyFits) {
      fullBatch ??= prepareRows(rows.read(0, n), n, d);
      stats = await backend.dataTermPrepared(fullBatch, B, state.points, k, d, kernel);
    } else if (n * d <= SHUFFLED_COPY_MAX_VALUES && copyFits && copyPays) {
      // A window at a random offset of one random permutation of the rows is a uniformly random
      // B-subset, read without copying; gathering B scattered rows each step cost more than the
      // kernel. The copy is kept in prepared form [x, |x|², 1], built once instead of per call.
      shuffled ??= prepareRows(rows.gather(Rng.fromState(state.shuffleState).shuffle(range(0, n))), n, d);
      const offset = rng.int(n - B + 1);
      stats = await backend.dataTermPrepared(shuffled.subarray(offset * (d + 2), (offset + B) * (d + 2)), B, state.points, k, d, kernel);
    } else if (rows.resident) {
      const batch = rows.gather(rng.sample(n, B), (batchBuffer ??= new Float32Array(B * d)));
      stats = await backend.dataTerm(batch, B, state.points, k, d, kernel);
    } else {
      const idx = blockMinibatch(n, d, B, rng);
      batchRows = idx.length;
      if (!batchBuffer || batchBuffer.length < batchRows * d) batchBuffer = new Float32Array(batchRows * d);
      const batch = rows.gather(idx, batchBuffer.subarray(0, batchRows * d));
      stats = await backend.dataTerm(batch, batchRows, state.points, k, d, kernel);
    }
    const self = await selfTerm(backend, kernel, state.points, state.weights, k, d);

    // Loss estimate and data-term means for the weight solver.
    let lin = 0;
    const c = new Float64Array(k);
    for (let j = 0; j < k; j++) {
      c[j] = stats.hSum[j] / batchRows;
      lin += state.weights[j] * c[j];
    }
    // The stability penalty is part of the objective, so of the running loss the plateau test reads.
    const penalty = ctx.anchors ? anchorPenalty(ctx.anchors, state.points, d, (anchorGrad ??= new Float64Array(k * d)).fill(0)) : 0;
    const loss = 2 * lin - self.quadratic - ctx.constant + penalty;
    state.lossEma = state.lossEma === null ? loss : state.lossEma + emaRate * (loss - state.lossEma);
    if (state.cEma === null) state.cEma = c;
    else for (let j = 0; j < k; j++) state.cEma[j] += 0.2 * (c[j] - state.cEma[j]);
    if (state.initialLoss === null) state.initialLoss = loss;

    // ∇ₚⱼ D² = 2wⱼ [ (gSumⱼ pⱼ − gxⱼ)/B − (self)ⱼ ].
    for (let j = 0; j < k; j++) {
      const wj = state.weights[j];
      const row = j * d;
      for (let t = 0; t < d; t++) {
        const data = (stats.gSum[j] * state.points[row + t] - stats.gx[row + t]) / batchRows;
        grad[row + t] = 2 * wj * (data - self.grad[row + t]);
      }
    }
    if (anchorGrad) for (let i = 0; i < grad.length; i++) grad[i] += anchorGrad[i];
    if (state.optimizer.kind === 'sgd') normaliseForSgd(state, grad, k, d);

    const lr = lr0 * Math.pow(o.finalLearningRateFraction, Math.min(fraction, 1));
    optimizerStep(state.optimizer, state.points, grad, { lr, frozen: ctx.frozen, frozenStride: d });
    state.iteration++;
    state.elapsedMs = now() - started;

    // Weights join the descent only late (from weightsFrom of the budget): moved early, they freeze
    // the structure (a point with a small weight gets a small gradient and stays where it was seeded).
    if (o.optimizeWeights && k > 1 && fraction >= o.weightsFrom && state.iteration % o.weightEvery === 0) {
      // c from the (larger) weight sample rather than the minibatch: noisy c gives noisy weights.
      const cw = ctx.weightRows ? await dataTermMeans(ctx.weightRows, backend, kernel, state.points, k) : state.cEma;
      const { K } = await selfTerm(backend, kernel, state.points, state.weights, k, d, false);
      state.weights = solveWeights(cw, K, { start: state.weights, maxIterations: 500, tol: 1e-6 }).weights;
    }
    if (state.iteration % traceEvery === 0) trace.push([state.iteration, state.lossEma]);
    ctx.onProgress?.({ iteration: state.iteration, maxIterations: o.maxIterations, loss: state.lossEma, elapsedMs: state.elapsedMs, fraction });

    if (o.plateauTolerance > 0 && state.iteration % o.plateauWindow === 0) {
      const ref = Math.abs(state.initialLoss) || 1;
      if (state.windowStartLoss !== null && state.windowStartLoss - state.lossEma < o.plateauTolerance * ref && fraction > plateauFrom) {
        stopReason = 'plateau';
        break;
      }
      state.windowStartLoss = state.lossEma;
    }
    if (ctx.shouldStop?.()) {
      stopReason = 'cancelled';
      break;
    }
    if (ctx.onCheckpoint && now() - lastCheckpoint >= (ctx.checkpointEveryMs ?? 10_000)) {
      await ctx.onCheckpoint(state, rng.state(), trace);
      lastCheckpoint = now();
    }
  }
  return { state, stopReason, trace };
}

/**
 * Exact self term: quadratic = Σᵢⱼ wᵢwⱼ h(|pᵢ − pⱼ|), K = [h(|pᵢ − pⱼ|)], and for each j
 * grad[j] = Σᵢ wᵢ g(|pⱼ − pᵢ|²)(pⱼ − pᵢ), so ∇ₚⱼ of the quadratic is 2wⱼ·grad[j].
 * The k×k×d product runs on the backend (gemm); the diagonal is skipped since pⱼ − pⱼ = 0.
 * With `gradient` false only K and the quadratic are formed (grad is empty): D² evaluations need
 * no k×k×d product.
 */
export async function selfTerm(
  backend: ComputeBackend,
  kernel: KernelSpec,
  points: Float32Array,
  weights: Float64Array,
  k: number,
  d: number,
  gradient = true,
): Promise<{ quadratic: number; K: Float64Array; grad: Float64Array }> {
  if (k * k * d <= SELF_TERM_DIRECT_MAX) return selfTermDirect(kernel, points, weights, k, d, gradient);
  return selfTermOnBackend(backend, kernel, points, weights, k, d, gradient);
}

/** The self term with the k×k distances and the k×k×d product on the backend. */
export async function selfTermOnBackend(
  backend: ComputeBackend,
  kernel: KernelSpec,
  points: Float32Array,
  weights: Float64Array,
  k: number,
  d: number,
  gradient = true,
): Promise<{ quadratic: number; K: Float64Array; grad: Float64Array }> {
  const sq = await backend.sqDistances(points, k, points, k, d);
  const K = new Float64Array(k * k);
  const G = new Float32Array(k * k);
  const rowSum = new Float64Array(k);
  let quadratic = 0;
  for (let j = 0; j < k; j++) {
    for (let i = 0; i < k; i++) {
      const s = i === j ? 0 : sq[j * k + i];
      const h = kernelH(kernel, s);
      K[j * k + i] = h;
      quadratic += weights[j] * weights[i] * h;
      if (gradient && i !== j) {
        const g = weights[i] * kernelG(kernel, s);
        G[j * k + i] = g;
        rowSum[j] += g;
      }
    }
  }
  if (!gradient) return { quadratic, K, grad: new Float64Array(0) };
  const gp = await backend.gemm(G, k, k, points, k, d, false, false);
  const grad = new Float64Array(k * d);
  for (let j = 0; j < k; j++) {
    for (let t = 0; t < d; t++) grad[j * d + t] = rowSum[j] * points[j * d + t] - gp[j * d + t];
  }
  return { quadratic, K, grad };
}

/** Up to this k²·d the self term is one direct float64 pass: two backend calls cost more. */
const SELF_TERM_DIRECT_MAX = 1e5;

/** The self term by direct differences over the k(k − 1)/2 pairs (same result as selfTerm). */
export function selfTermDirect(
  kernel: KernelSpec,
  points: Float32Array,
  weights: Float64Array,
  k: number,
  d: number,
  gradient = true,
): { quadratic: number; K: Float64Array; grad: Float64Array } {
  const K = new Float64Array(k * k);
  const grad = new Float64Array(gradient ? k * d : 0);
  const h0 = kernelH(kernel, 0);
  let quadratic = 0;
  for (let j = 0; j < k; j++) {
    K[j * k + j] = h0;
    quadratic += weights[j] * weights[j] * h0;
    for (let i = j + 1; i < k; i++) {
      let s = 0;
      for (let t = 0; t < d; t++) {
        const diff = points[j * d + t] - points[i * d + t];
        s += diff * diff;
      }
      const h = kernelH(kernel, s);
      const g = kernelG(kernel, s);
      K[j * k + i] = h;
      K[i * k + j] = h;
      quadratic += 2 * weights[j] * weights[i] * h;
      if (!gradient) continue;
      const gj = weights[i] * g;
      const gi = weights[j] * g;
      for (let t = 0; t < d; t++) {
        const diff = points[j * d + t] - points[i * d + t];
        grad[j * d + t] += gj * diff;
        grad[i * d + t] -= gi * diff;
      }
    }
  }
  return { quadratic, K, grad };
}

/**
 * Momentum SGD has no per-coordinate scaling, so the raw gradient (of size ~wⱼ, and ~1/σ for the
 * Gaussian kernel) is divided per point by wⱼ and by the RMS point-gradient of the first step;
 * the step size is then in units of the data scale like Adam's.
 */
function normaliseForSgd(state: DescentState, grad: Float64Array, k: number, d: number): void {
  let total = 0;
  for (let j = 0; j < k; j++) {
    const wj = state.weights[j] || 1 / k;
    for (let t = 0; t < d; t++) {
      grad[j * d + t] /= wj;
      total += grad[j * d + t] ** 2;
    }
  }
  if (state.gradScale === null) state.gradScale = Math.sqrt(total / k) || 1;
  for (let i = 0; i < grad.length; i++) grad[i] /= state.gradScale;
}

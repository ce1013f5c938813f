import type { ComputeBackend } from '../compute/backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import { CairnError } from '../errors.js';
import type { DescentCheckpoint } from './checkpoint.js';
import { coverageStats, type LabelCodes } from './coverage.js';
import { runDescent, initialDescentState, selfTerm } from './descent.js';
import { constantTerm, dataTermMeans, discrepancyFromTerms } from './discrepancy.js';
import { autoIterations, parseSelectOptions, type SelectOptionsInput } from './options.js';
import { greedyPrefixOrder, prefixCurve } from './ordering.js';
import { Rng } from './random.js';
import { greedyForward } from './greedy.js';
import { KernelColumns } from './kernel-columns.js';
import { refineBySwaps } from './refine.js';
import type { SelectionResult, SelectProgress } from './result.js';
import { DenseRows, range, type RowSource } from './rows.js';
import { medianDistance } from './scale.js';
import { seedKMeansPlusPlus } from './seeding.js';
import { assignDistinct, nearestCandidates } from './snap.js';
import { parseSpace, prepareSpace } from './space.js';
import { solveWeights } from './weights.js';

export interface SelectContext {
  backend: ComputeBackend;
  labels?: LabelCodes | null;
  onProgress?: (p: SelectProgress) => void;
  signal?: AbortSignal;
  now?: () => number;
  /** The caller owns the rows and does not need them afterwards: raw and standardize spaces transform them in place. */
  sourceIsScratch?: boolean;
  /** Warm start: k starting points in the selection space (row-major), instead of k-means++ seeds. */
  initialPoints?: Float32Array;
  /**
   * Checkpoints of the descent, the long phase: `save` receives one every `everyMs`; `resume`, a
   * checkpoint saved by an earlier attempt of the same selection (same data, options and seed),
   * continues from it. The phases before the descent are deterministic and are recomputed.
   */
  checkpoint?: { save: (cp: DescentCheckpoint) => Promise<void> | void; everyMs?: number; resume?: DescentCheckpoint | null };
  /** Receives the nearest representative's rank (1-based) and distance for every row, from the coverage pass. */
  onAssignments?: (rank: Int32Array, distance: Float32Array) => Promise<void> | void;
}

/** Approximate share of the work per phase, for the overall progress fraction. */
const PHASE_SPAN = { prepare: [0, 0.05], scale: [0.05, 0.08], seed: [0.08, 0.12], descent: [0.12, 0.8], snap: [0.8, 0.85], refine: [0.85, 0.9], coverage: [0.9, 0.96], baseline: [0.96, 1], done: [1, 1] } as const;

/**
 * One selection: prepare the space, choose the kernel scale, seed, descend, snap to distinct real
 * items, refine by swaps, weigh, and measure coverage against random k-subsets.
 * Pure computation: rows come through a RowSource, heavy kernels through the backend.
 */
export async function select(source: RowSource, input: SelectOptionsInput, ctx: SelectContext): Promise<SelectionResult> {
  const o = parseSelectOptions(input);
  const { backend } = ctx;
  const n = source.rows;
  if (n === 0) throw new CairnError('DATASET_EMPTY');
  if (o.k > n) throw new CairnError('K_TOO_LARGE', `k = ${o.k} but the dataset has ${n} rows.`, { k: o.k, rows: n });
  const now = ctx.now ?? (() => performance.now());
  const rng = new Rng(o.seed);
  const seconds: Record<string, number> = {};
  let phaseStart = now();
  const progress = (phase: SelectProgress['phase'], within = 0, extra: Partial<SelectProgress> = {}): void => {
    const [a, b] = PHASE_SPAN[phase];
    ctx.onProgress?.({ phase, fraction: a + (b - a) * Math.min(Math.max(within, 0), 1), ...extra });
  };
  const endPhase = (name: string): void => {
    const t = now();
    seconds[name] = (t - phaseStart) / 1000;
    phaseStart = t;
  };
  const checkAbort = (): void => {
    if (ctx.signal?.aborted) throw new CairnError('SELECTION_CANCELLED');
  };

  progress('prepare');
  const space = await prepareSpace(source, parseSpace(o.space), backend, rng, { inPlace: ctx.sourceIsScratch });
  const rows = space.rows;
  const d = rows.cols;
  endPhase('prepare');
  checkAbort();

  progress('scale');
  const scale = await medianDistance(rows, backend, rng);
  const s = scale.median;
  const kernel: KernelSpec = o.kernel === 'energy' ? { kind: 'energy', a: o.alpha * s } : { kind: 'gaussian', sigma: o.sigmaFactor * s };
  const constant = await constantTerm(rows, backend, kernel, rng, { exactMaxRows: o.exactConstantMaxRows });
  endPhase('scale');
  checkAbort();

  // Rows for the stage values, the weight solves and the random baselines (all rows when small).
  const scoring = n <= o.refineSampleRows ? rows : new DenseRows(rows.gather(rng.sample(n, o.refineSampleRows)), o.refineSampleRows, d);
  const stageD2 = async (points: Float32Array, w: Float64Array): Promise<number> => {
    const c = await dataTermMeans(scoring, backend, kernel, points, o.k);
    const { K } = await selfTerm(backend, kernel, points, w, o.k, d, false);
    return discrepancyFromTerms(c, K, w, constant.value);
  };

  progress('seed');
  let points: Float32Array;
  let seedRows: Int32Array | null = null;
  if (ctx.initialPoints) {
    if (ctx.initialPoints.length !== o.k * d) {
      throw new CairnError('DIMENSION_MISMATCH', `initial points must be ${o.k}×${d}.`, { expected: o.k * d, got: ctx.initialPoints.length });
    }
    points = Float32Array.from(ctx.initialPoints);
  } else {
    seedRows = await seedKMeansPlusPlus(rows, o.k, backend, rng);
    points = rows.gather(seedRows);
  }
  const uniform = new Float64Array(o.k).fill(1 / o.k);
  const seededD2 = await stageD2(points, uniform);
  endPhase('seed');
  checkAbort();

  let state = initialDescentState(points, o.k, o.optimizer, rng);
  const resume = ctx.checkpoint?.resume;
  let descentRng = rng;
  // A checkpoint of another shape cannot be this selection's; starting afresh is always correct.
  if (resume && resume.state.points.length === o.k * d && resume.state.weights.length === o.k) {
    state = resume.state;
    descentRng = Rng.fromState(resume.rng);
  }
  const save = ctx.checkpoint?.save;
  const descent = await runDescent(
    {
      rows,
      backend,
      kernel,
      rng: descentRng,
      scale: s,
      constant: constant.value,
      weightRows: scoring,
      now,
      shouldStop: () => ctx.signal?.aborted ?? false,
      initialTrace: state === resume?.state ? resume.trace : undefined,
      checkpointEveryMs: ctx.checkpoint?.everyMs,
      onCheckpoint: save ? (st, rngState, trace) => save({ version: 1, state: st, rng: rngState, trace }) : undefined,
      onProgress: (p) => {
        const rate = p.iteration > 0 ? p.elapsedMs / p.iteration : 0;
        const byIterations = (p.maxIterations - p.iteration) * rate;
        const byTime = o.timeBudgetSeconds ? o.timeBudgetSeconds * 1000 - p.elapsedMs : Infinity;
        progress('descent', p.fraction, { iteration: p.iteration, maxIterations: p.maxIterations, loss: p.loss, etaSeconds: Math.max(0, Math.min(byIterations, byTime)) / 1000 });
      },
    },
    state,
    {
      optimizer: o.optimizer,
      batchSize: o.batchSize,
      maxIterations: o.maxIterations ?? autoIterations(o.k),
      timeBudgetMs: o.timeBudgetSeconds ? o.timeBudgetSeconds * 1000 : null,
      learningRate: o.learningRate,
      finalLearningRateFraction: o.finalLearningRateFraction,
      plateauTolerance: o.plateauTolerance,
      plateauWindow: 100,
      weightEvery: 25,
      optimizeWeights: o.weights === 'optimized',
      weightsFrom: 0.7,
    },
  );
  // Stopped early (cancelled, or a worker shutting down): keep the latest state for a later attempt.
  if (descent.stopReason === 'cancelled' && save) await save({ version: 1, state, rng: descentRng.state(), trace: descent.trace });
  checkAbort();
  // The rest of the selection draws from the generator where the descent left it.
  if (descentRng !== rng) rng.restore(descentRng.state());
  const descentWeights = o.weights === 'optimized' ? state.weights : uniform;
  const descentD2 = await stageD2(state.points, descentWeights);
  endPhase('descent');

  progress('snap');
  const cand = await nearestCandidates(rows, backend, state.points, o.k, o.snapCandidates);
  const snapped = assignDistinct(cand, o.k, n, rng);
  endPhase('snap');
  checkAbort();

  progress('refine');
  // Swap candidates: the reference rows of the constant term (every row up to
  // exactConstantMaxRows, else its sample), whose data terms cᵢ that pass already computed, capped
  // so the pool × k kernel table and the pool's vectors stay bounded; plus each point's nearest items.
  const m = constant.referenceIndex.length;
  const maxPool = o.refine ? Math.max(o.k, Math.min(Math.floor(o.refinePoolEntries / o.k), Math.floor(2 ** 26 / d))) : 0;
  const picked = m <= maxPool ? range(0, m) : rng.sample(m, maxPool);
  const poolRows: number[] = [];
  const poolCValues: number[] = [];
  const inPool = new Set<number>();
  for (const pos of picked) {
    poolRows.push(constant.referenceIndex[pos]);
    poolCValues.push(constant.rowMeans[pos]);
    inPool.add(constant.referenceIndex[pos]);
  }
  const extras = Array.from(new Set([...snapped, ...(o.refine ? Array.from(cand.index) : [])])).filter((r) => r >= 0 && !inPool.has(r));
  if (extras.length) {
    const extraC = await dataTermMeans(constant.reference, backend, kernel, rows.gather(extras), extras.length);
    extras.forEach((r, i) => {
      poolRows.push(r);
      poolCValues.push(extraC[i]);
    });
  }
  const poolC = Float64Array.from(poolCValues);
  const slotOf = new Map(poolRows.map((r, i) => [r, i]));
  const columns = new KernelColumns(backend, kernel, rows.gather(poolRows), poolRows.length, d);
  const refineFrom = (slots: Int32Array, weights: Float64Array) =>
    refineBySwaps(columns, kernel, {
      poolSize: poolRows.length,
      c: poolC,
      slots,
      weights,
      optimizeWeights: o.weights === 'optimized',
      maxSwaps: o.refine ? 20 * o.k : 0,
      rounds: o.refine ? 3 : 1,
    });
  const fromDescent = await refineFrom(Int32Array.from(snapped, (r) => slotOf.get(r)!), descentWeights);
  // Starts that do not depend on the descent's basin: greedy forward selection over the same
  // candidates, and the seeds. Swaps run from each; the lowest D² wins (see trace.refineStart).
  let refined = fromDescent;
  let refineStart: RefineStart = 'descent';
  if (o.refine) {
    const starts: Array<[RefineStart, Int32Array, Float64Array]> = [
      ['greedy', await greedyForward(columns, kernel, poolC, o.k), uniform],
    ];
    // The k-means++ seeds are real items already: a third start at no extra cost.
    if (seedRows && seedRows.every((r) => slotOf.has(r))) starts.push(['seeds', Int32Array.from(seedRows, (r) => slotOf.get(r)!), uniform]);
    for (const [name, slots, weights] of starts) {
      const result = await refineFrom(slots, weights);
      if (result.after < refined.after) {
        refined = result;
        refineStart = name;
      }
    }
  }
  const chosen = Int32Array.from(refined.slots, (u) => poolRows[u]);
  const snappedD2 = fromDescent.before - constant.value;
  const refinedD2 = refined.after - constant.value;
  endPhase('refine');
  checkAbort();

  progress('coverage');
  const reps = rows.gather(chosen);
  const s2 = [0.25, 0.5, 0.75, 1].map((f) => f * s);
  const radii = o.radius ? [...s2, o.radius].sort((a, b) => a - b) : s2;
  const cov = await coverageStats(rows, backend, kernel, reps, o.k, ctx.labels ?? null, { radii, worstCount: o.worstCount });
  const { K } = await selfTerm(backend, kernel, reps, uniform, o.k, d, false);
  const c = cov.dataTermMeans;
  let weights: Float64Array = uniform;
  let weightSolver: SelectionResult['trace']['weightSolver'] = null;
  if (o.weights === 'optimized') {
    const sol = solveWeights(c, K, { start: refined.weights });
    weights = sol.weights;
    weightSolver = { converged: sol.converged, gap: sol.gap, iterations: sol.iterations };
  }
  const finalD2 = discrepancyFromTerms(c, K, weights, constant.value);
  endPhase('coverage');
  checkAbort();

  progress('baseline');
  const draws: number[][] = [];
  for (let r = 0; r < o.randomDraws; r++) {
    const idx = rng.sample(n, o.k);
    const pts = rows.gather(idx);
    const cr = await dataTermMeans(scoring, backend, kernel, pts, o.k);
    const { K: Kr } = await selfTerm(backend, kernel, pts, uniform, o.k, d, false);
    draws.push(prefixCurve(cr, Kr, constant.value));
  }
  const randomFinal = draws.map((curve) => curve[o.k - 1]);
  const randomMedian = median(randomFinal);
  const { order, curve } = greedyPrefixOrder(c, K, constant.value);
  endPhase('baseline');

  const representatives = order.map((j, rank) => {
    const rc = cov.perRepresentative[j];
    return {
      rank: rank + 1,
      index: chosen[j],
      weight: weights[j],
      share: rc.share,
      count: rc.count,
      meanDistance: rc.meanDistance,
      p90Distance: rc.p90Distance,
      radius: rc.maxDistance,
      labels: rc.labels,
    };
  });
  const rankOf = new Int32Array(o.k);
  order.forEach((j, rank) => (rankOf[j] = rank + 1));
  if (ctx.onAssignments) {
    const rank = Int32Array.from(cov.assignment, (j) => rankOf[j]);
    await ctx.onAssignments(rank, cov.distance);
  }
  progress('done', 1);

  return {
    version: 1,
    k: o.k,
    rows: n,
    dims: d,
    space: o.space,
    kernel: kernel.kind === 'energy' ? { kind: 'energy', a: kernel.a } : { kind: 'gaussian', sigma: kernel.sigma },
    scale: s,
    seed: o.seed,
    weights: o.weights,
    representatives,
    coverage: {
      meanDistance: cov.meanDistance,
      p90Distance: cov.p90Distance,
      maxDistance: cov.maxDistance,
      coveredWithin: cov.coveredWithin,
      worstCovered: cov.worstCovered.map((w) => ({ index: w.index, distance: w.distance, nearestRank: rankOf[w.nearest] })),
      labels: cov.labels,
    },
    discrepancy: {
      value: nonNegative(finalD2),
      constant: { value: constant.value, exact: constant.exact, sampleRows: constant.sampleRows, standardError: constant.standardError },
      random: { median: nonNegative(randomMedian), draws: randomFinal.map(nonNegative) },
      // No ratio when random k-subsets already represent the data exactly (e.g. all rows equal).
      ratioToRandom: randomMedian > 0 ? nonNegative(finalD2) / randomMedian : null,
      prefix: curve.map((value, m) => ({ m: m + 1, value: nonNegative(value), random: nonNegative(median(draws.map((dr) => dr[m]))) })),
      stages: {
        seeded: nonNegative(seededD2),
        descent: nonNegative(descentD2),
        snapped: nonNegative(snappedD2),
        refined: nonNegative(refinedD2),
        final: nonNegative(finalD2),
      },
    },
    trace: {
      iterations: state.iteration,
      stopReason: descent.stopReason,
      scaleDegenerate: scale.degenerate,
      swaps: refined.swaps,
      refineStart,
      weightSolver,
      loss: descent.trace,
      seconds,
      ...(space.explainedVarianceRatio ? { explainedVarianceRatio: space.explainedVarianceRatio } : {}),
    },
  };
}

type RefineStart = SelectionResult['trace']['refineStart'];

/** D² ≥ 0 (h is conditionally negative definite); rounding can leave values like −1e−16. */
function nonNegative(v: number): number {
  return Math.max(0, v);
}

function median(values: number[]): number {
  const v = [...values].sort((a, b) => a - b);
  const h = v.length >> 1;
  return v.length % 2 ? v[h] : (v[h - 1] + v[h]) / 2;
}

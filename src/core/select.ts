import type { ComputeBackend } from '../compute/backend.js';
import type { KernelSpec } from '../compute/kernel-spec.js';
import { CairnError } from '../errors.js';
import type { DescentCheckpoint } from './checkpoint.js';
import { coverageStats, type LabelCodes } from './coverage.js';
import { runDescent, initialDescentState, selfTerm, type DescentAnchors } from './descent.js';
import { checkGivenItems, type FixedItems, type PreviousSelection } from './given-items.js';
import { constantTerm, controlledConstant, dataTermMeans, discrepancyFromTerms } from './discrepancy.js';
import { autoIterations, parseSelectOptions, type SelectOptionsInput } from './options.js';
import { greedyPrefixOrder, prefixCurve } from './ordering.js';
import { Rng } from './random.js';
import { greedyForward } from './greedy.js';
import { KernelColumns } from './kernel-columns.js';
import { refineBySwaps } from './refine.js';
import type { FixedRepresentative, SelectionResult, SelectProgress } from './result.js';
import { DenseRows, range, type RowSource } from './rows.js';
import { medianDistance } from './scale.js';
import { seedKMeansPlusPlus } from './seeding.js';
import { localPasses, type RowPasses } from './row-passes.js';
import { assignDistinct, type CandidateLists } from './snap.js';
import { parseSpace, prepareSpace, type SpaceRecipe } from './space.js';
import { solveWeights } from './weights.js';

export interface SelectContext {
  backend: ComputeBackend;
  labels?: LabelCodes | null;
  onProgress?: (p: SelectProgress) => void;
  signal?: AbortSignal;
  now?: () => number;
  /** The caller owns the rows and does not need them afterwards: raw and standardize spaces transform them in place. */
  sourceIsScratch?: boolean;
  /**
   * Bytes the selection may hold in copies of the rows: a source held in memory (DenseRows) and
   * the samples (scoring rows, the constant term's reference rows, swap candidates: bounded by the
   * options, held whatever the budget) count first; the transformed rows, the descent's shuffled
   * copy and the refinement's kernel-column cache take what is left. What does not fit is read
   * from the source in blocks (see RowSource.resident). Default: no limit.
   */
  memoryBudgetBytes?: number;
  /** Warm start: k starting points in the selection space (row-major), instead of k-means++ seeds. */
  initialPoints?: Float32Array;
  /**
   * Items that are representatives already (e.g. annotated earlier). They enter D² with their own
   * weights, never move, are never snapped or swapped out, and rows of the source that are fixed
   * items are never chosen; k new items are chosen besides them. Reported in result.fixed and
   * result.coverageGain. A checkpoint of such a selection holds k + f points (decodeCheckpoint(text, k + f)).
   */
  fixed?: FixedItems;
  /**
   * Stable re-selection: an earlier result's representatives. The descent starts from them (the
   * first k; k-means++ seeds complete fewer), a penalty keeps points near them, snapping prefers
   * the earlier item, and the swaps replace a kept earlier item only for a D² gain above a
   * threshold (see stabilityThreshold). Reported in result.stability. Not together with initialPoints.
   */
  previous?: PreviousSelection;
  /**
   * Checkpoints of the descent, the long phase: `save` receives one every `everyMs`; `resume`, a
   * checkpoint saved by an earlier attempt of the same selection (same data, options and seed),
   * continues from it. The phases before the descent are deterministic and are recomputed.
   */
  checkpoint?: { save: (cp: DescentCheckpoint) => Promise<void> | void; everyMs?: number; resume?: DescentCheckpoint | null };
  /**
   * Receives the nearest representative's rank (1-based) and distance for every row, from the
   * coverage pass; a row nearest to fixed item i gets −(i + 1).
   */
  onAssignments?: (rank: Int32Array, distance: Float32Array) => Promise<void> | void;
  /**
   * Where the full passes (snapping candidates, coverage) run, given how the selection space is
   * made from the source rows: e.g. split into row ranges that other workers take. Every choice
   * returns what localPasses returns (the default).
   */
  passes?: (space: SpaceRecipe) => RowPasses;
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
  const given = checkGivenItems(ctx.fixed, ctx.previous, n, source.cols);
  const k = o.k;
  const f = given.fixed.count;
  // Points: the k new ones first, then the f fixed ones.
  const total = k + f;
  const fixedIdx = Array.from({ length: f }, (_, i) => k + i);
  if (k > n - given.fixedRows.size) {
    throw new CairnError('K_TOO_LARGE', `k = ${k} but only ${n - given.fixedRows.size} rows are not fixed items.`, { k, rows: n, fixedRows: given.fixedRows.size });
  }
  if (given.previous && ctx.initialPoints) throw new CairnError('INVALID_ARGUMENT', 'previous and initialPoints are two warm starts: pass one.', { field: 'previous' });
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
  let budgetLeft = (ctx.memoryBudgetBytes ?? Infinity) - (source instanceof DenseRows ? source.data.byteLength : 0);
  const space = await prepareSpace(source, parseSpace(o.space), backend, rng, { inPlace: ctx.sourceIsScratch, maxCopyBytes: Math.max(0, budgetLeft) });
  budgetLeft -= space.heldBytes;
  const rows = space.rows;
  const d = rows.cols;
  const passes = ctx.passes ? ctx.passes(space.recipe) : localPasses;
  const fixedPoints = f > 0 ? await space.transform(given.fixed.vectors, f) : new Float32Array(0);
  const prev = given.previous;
  // The first k earlier representatives (they are in rank order), in the selection space.
  const kp = prev ? Math.min(prev.count, k) : 0;
  const prevPoints = kp > 0 ? await space.transform(prev!.vectors.subarray(0, kp * source.cols), kp) : new Float32Array(0);
  const prevRows = prev ? prev.rows.subarray(0, kp) : new Int32Array(0);
  const withFixed = (points: Float32Array): Float32Array => (f > 0 ? concat(points, fixedPoints) : points);
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
  // The samples are held whatever the budget; they count against it before anything optional.
  if (scoring !== rows) budgetLeft -= o.refineSampleRows * d * 4;
  if (!constant.exact) budgetLeft -= constant.reference.rows * d * 4;
  const stageD2 = async (points: Float32Array, w: Float64Array): Promise<number> => {
    const c = await dataTermMeans(scoring, backend, kernel, points, total);
    const { K } = await selfTerm(backend, kernel, points, w, total, d, false);
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
  } else if (prev) {
    // The earlier representatives, and k-means++ seeds given them (and the fixed items) for the rest.
    const extra =
      k > kp ? await seedKMeansPlusPlus(rows, k - kp, backend, rng, undefined, { given: concat(prevPoints, fixedPoints), exclude: new Set([...given.fixedRows, ...prevRows]) }) : new Int32Array(0);
    points = concat(prevPoints, rows.gather(extra));
    // The earlier items themselves are a start for the swaps (deleted ones filled in after snapping).
    seedRows = concat(prevRows, extra);
  } else {
    seedRows = await seedKMeansPlusPlus(rows, k, backend, rng, undefined, f > 0 ? { given: fixedPoints, exclude: given.fixedRows } : {});
    points = rows.gather(seedRows);
  }
  points = withFixed(points);
  const uniform = new Float64Array(total).fill(1 / total);
  const seededD2 = await stageD2(points, uniform);
  const threshold = stabilityThreshold(prev?.strength ?? 0, seededD2, k);
  let anchors: DescentAnchors | undefined;
  if (kp > 0 && threshold > 0) {
    // ρⱼ: distance from the earlier position to its snapCandidates-th nearest row, the ball within
    // which snapping can still return the earlier item (at least 1% of s, for duplicate rows).
    const near = await passes.nearest(rows, backend, prevPoints, kp, o.snapCandidates);
    const radius = Float64Array.from({ length: kp }, (_, j) => Math.max(Math.sqrt(Math.max(near.sqDist[j * near.m + near.m - 1], 0)), 0.01 * s));
    anchors = { points: prevPoints, active: new Uint8Array(kp).fill(1), coefficient: threshold, radius };
  }
  endPhase('seed');
  checkAbort();

  let state = initialDescentState(points, total, o.optimizer, rng);
  const resume = ctx.checkpoint?.resume;
  let descentRng = rng;
  // A checkpoint of another shape cannot be this selection's; starting afresh is always correct.
  if (resume && resume.state.points.length === total * d && resume.state.weights.length === total) {
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
      frozen: f > 0 ? Uint8Array.from({ length: total }, (_, j) => (j >= k ? 1 : 0)) : undefined,
      anchors,
      now,
      shouldStop: () => ctx.signal?.aborted ?? false,
      initialTrace: state === resume?.state ? resume.trace : undefined,
      maxCopyBytes: Math.max(0, budgetLeft),
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
      maxIterations: o.maxIterations ?? autoIterations(k),
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
  const cand = await passes.nearest(rows, backend, state.points.subarray(0, k * d), k, o.snapCandidates);
  const preferred = anchors ? Int32Array.from({ length: k }, (_, j) => (j < kp ? prevRows[j] : -1)) : undefined;
  const snapped = assignDistinct(cand, k, n, rng, given.fixedRows, preferred);
  endPhase('snap');
  checkAbort();

  progress('refine');
  // Swap candidates: the reference rows of the constant term (every row up to
  // exactConstantMaxRows, else its sample), whose data terms cᵢ that pass already computed, capped
  // so the pool × k kernel table and the pool's vectors stay bounded; plus each point's nearest items.
  const m = constant.referenceIndex.length;
  const maxPool = o.refine ? Math.max(k, Math.min(Math.floor(o.refinePoolEntries / k), Math.floor(2 ** 26 / d))) : 0;
  const picked = m <= maxPool ? range(0, m) : rng.sample(m, maxPool);
  const poolRows: number[] = [];
  const poolCValues: number[] = [];
  const inPool = new Set<number>();
  for (const pos of picked) {
    const r = constant.referenceIndex[pos];
    // A fixed item's row is in the pool once, as the fixed item (appended after the rows).
    if (given.fixedRows.has(r)) continue;
    poolRows.push(r);
    poolCValues.push(constant.rowMeans[pos]);
    inPool.add(r);
  }
  // The earlier items are candidates too, so a swap can bring one back.
  const extras = Array.from(new Set([...snapped, ...(o.refine ? Array.from(cand.index) : []), ...prevRows])).filter((r) => r >= 0 && !inPool.has(r) && !given.fixedRows.has(r));
  if (extras.length) {
    const extraC = await dataTermMeans(constant.reference, backend, kernel, rows.gather(extras), extras.length);
    extras.forEach((r, i) => {
      poolRows.push(r);
      poolCValues.push(extraC[i]);
    });
  }
  const rowSlots = poolRows.length;
  // Fixed items are the last f pool entries: in every set, frozen, never a candidate for a swap.
  const fixedSlots = Int32Array.from({ length: f }, (_, i) => rowSlots + i);
  const poolC = f > 0 ? concat(Float64Array.from(poolCValues), await dataTermMeans(constant.reference, backend, kernel, fixedPoints, f)) : Float64Array.from(poolCValues);
  const slotOf = new Map(poolRows.map((r, i) => [r, i]));
  // The descent's copy is gone by now: its share of the budget goes to the cached columns.
  // Also held: the candidates' prepared rows, and the k columns of the current set that each swap
  // search keeps (in refine.ts). The cache holds at least one set's columns whatever the budget.
  const poolEntries = rowSlots + f;
  const columnValues = Math.max((budgetLeft - poolEntries * (d + 2) * 4 - total * poolEntries * 8) / 8, total * poolEntries);
  const columns = new KernelColumns(backend, kernel, withFixed(rows.gather(poolRows)), rowSlots + f, d, columnValues);
  let bonus: Float64Array | undefined;
  if (threshold > 0 && kp > 0) {
    bonus = new Float64Array(rowSlots + f);
    for (const r of prevRows) if (r >= 0) bonus[slotOf.get(r)!] = threshold;
  }
  // An earlier item that no longer exists is stood in for by its point's nearest free candidate.
  if (seedRows && seedRows.some((r) => r < 0)) seedRows = fillDeleted(seedRows, cand, given.fixedRows);
  const frozenSlots = f > 0 ? Uint8Array.from({ length: total }, (_, j) => (j >= k ? 1 : 0)) : undefined;
  const refineFrom = (slots: Int32Array, weights: Float64Array) =>
    refineBySwaps(columns, kernel, {
      poolSize: rowSlots + f,
      c: poolC,
      slots: f > 0 ? concat(slots, fixedSlots) : slots,
      weights,
      frozen: frozenSlots,
      bonus,
      optimizeWeights: o.weights === 'optimized',
      maxSwaps: o.refine ? 20 * k : 0,
      rounds: o.refine ? 3 : 1,
    });
  const fromDescent = await refineFrom(Int32Array.from(snapped, (r) => slotOf.get(r)!), descentWeights);
  // Starts that do not depend on the descent's basin: greedy forward selection over the same
  // candidates, and the seeds. Swaps run from each; the lowest D² wins (see trace.refineStart) —
  // in a stable re-selection, the lowest D² minus the threshold per earlier item kept.
  let refined = fromDescent;
  let refineStart: RefineStart = 'descent';
  if (o.refine) {
    const starts: Array<[RefineStart, Int32Array, Float64Array]> = [
      ['greedy', await greedyForward(columns, kernel, poolC, k, fixedSlots), uniform],
    ];
    // The k-means++ seeds (or the earlier items) are real items already: a third start at no extra cost.
    if (seedRows && seedRows.every((r) => slotOf.has(r)) && new Set(seedRows).size === k) {
      starts.push(['seeds', Int32Array.from(seedRows, (r) => slotOf.get(r)!), uniform]);
    }
    for (const [name, slots, weights] of starts) {
      const result = await refineFrom(slots, weights);
      if (result.after - result.bonusAfter < refined.after - refined.bonusAfter) {
        refined = result;
        refineStart = name;
      }
    }
  }
  const chosen = Int32Array.from(refined.slots.subarray(0, k), (u) => poolRows[u]);
  const snappedD2 = fromDescent.before - constant.value;
  const refinedD2 = refined.after - constant.value;
  columns.clear();
  endPhase('refine');
  checkAbort();

  progress('coverage');
  const reps = withFixed(rows.gather(chosen));
  const s2 = [0.25, 0.5, 0.75, 1].map((x) => x * s);
  const radii = o.radius ? [...s2, o.radius].sort((a, b) => a - b) : s2;
  const cov = await coverageStats(rows, backend, kernel, reps, total, ctx.labels ?? null, { radii, worstCount: o.worstCount }, passes);
  const { K } = await selfTerm(backend, kernel, reps, uniform, total, d, false);
  const c = cov.dataTermMeans;
  let weights: Float64Array = uniform;
  let weightSolver: SelectionResult['trace']['weightSolver'] = null;
  if (o.weights === 'optimized') {
    const sol = solveWeights(c, K, { start: refined.weights });
    weights = sol.weights;
    weightSolver = { converged: sol.converged, gap: sol.gap, iterations: sol.iterations };
  }
  // Above exactConstantMaxRows the constant was estimated from a row sample; the final
  // representatives sharpen that estimate (a control variate) for every value reported from here.
  // (The stage values keep the first estimate: each is D² against the sample its terms came from.)
  const reported = await controlledConstant(constant, backend, kernel, reps, total, weights, c, n);
  const finalD2 = discrepancyFromTerms(c, K, weights, reported.value);
  let coverageGain: SelectionResult['coverageGain'] = null;
  if (f > 0) {
    const cF = c.slice(k);
    const KF = new Float64Array(f * f);
    for (let i = 0; i < f; i++) for (let j = 0; j < f; j++) KF[i * f + j] = K[(k + i) * total + k + j];
    const wF = o.weights === 'optimized' ? solveWeights(cF, KF).weights : new Float64Array(f).fill(1 / f);
    const fixedOnly = nonNegative(discrepancyFromTerms(cF, KF, wF, reported.value));
    coverageGain = { fixedOnly, withNew: nonNegative(finalD2), gain: Math.max(0, fixedOnly - nonNegative(finalD2)) };
  }
  endPhase('coverage');
  checkAbort();

  progress('baseline');
  const draws: number[][] = [];
  // Random k-subsets of the rows that are not fixed items, each together with the fixed items.
  const freeRows = given.fixedRows.size > 0 ? Int32Array.from({ length: n }, (_, i) => i).filter((i) => !given.fixedRows.has(i)) : null;
  const fixedScoringC = f > 0 ? await dataTermMeans(scoring, backend, kernel, fixedPoints, f) : null;
  for (let r = 0; r < o.randomDraws; r++) {
    const sampled = rng.sample(freeRows ? freeRows.length : n, k);
    const idx = freeRows ? sampled.map((i) => freeRows[i]) : sampled;
    const pts = rows.gather(idx);
    const cr = await dataTermMeans(scoring, backend, kernel, pts, k);
    const { K: Kr } = await selfTerm(backend, kernel, withFixed(pts), uniform, total, d, false);
    draws.push(prefixCurve(fixedScoringC ? concat(cr, fixedScoringC) : cr, Kr, reported.value, fixedIdx));
  }
  const randomFinal = draws.map((curve) => curve[k - 1]);
  const randomMedian = median(randomFinal);
  const { order, curve } = greedyPrefixOrder(c, K, reported.value, fixedIdx);
  endPhase('baseline');

  /** Weight and coverage figures of point j (a new representative or a fixed item). */
  const coverageOf = (j: number) => {
    const rc = cov.perRepresentative[j];
    return { weight: weights[j], share: rc.share, count: rc.count, meanDistance: rc.meanDistance, p90Distance: rc.p90Distance, radius: rc.maxDistance, labels: rc.labels };
  };
  const representatives = order.map((j, rank) => {
    return { rank: rank + 1, index: chosen[j], ...coverageOf(j) };
  });
  const fixedResult: FixedRepresentative[] | null =
    f > 0
      ? fixedIdx.map((j, position) => {
          const row = given.fixed.rows[position];
          return { position, index: row >= 0 ? row : null, ...coverageOf(j) };
        })
      : null;
  // Rank 1..k of each new item; a fixed item i is −(i + 1) in the assignments, 0 as nearestRank.
  const rankOf = new Int32Array(total);
  order.forEach((j, rank) => (rankOf[j] = rank + 1));
  if (ctx.onAssignments) {
    const rank = Int32Array.from(cov.assignment, (j) => (j < k ? rankOf[j] : -(j - k + 1)));
    await ctx.onAssignments(rank, cov.distance);
  }
  let stabilityResult: SelectionResult['stability'] = null;
  if (prev) {
    const chosenSet = new Set(chosen);
    const kept = Array.from(prev.rows).filter((r) => r >= 0 && chosenSet.has(r)).length;
    stabilityResult = { previous: prev.count, kept, replaced: prev.count - kept, added: k - kept, strength: prev.strength };
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
    fixed: fixedResult,
    coverageGain,
    stability: stabilityResult,
    coverage: {
      meanDistance: cov.meanDistance,
      p90Distance: cov.p90Distance,
      maxDistance: cov.maxDistance,
      coveredWithin: cov.coveredWithin,
      worstCovered: cov.worstCovered.map((w) =>
        w.nearest < k ? { index: w.index, distance: w.distance, nearestRank: rankOf[w.nearest] } : { index: w.index, distance: w.distance, nearestRank: 0, nearestFixed: w.nearest - k },
      ),
      labels: cov.labels,
    },
    discrepancy: {
      value: nonNegative(finalD2),
      constant: { value: reported.value, exact: reported.exact, sampleRows: reported.sampleRows, standardError: reported.standardError },
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

/**
 * The threshold of a re-selection with strength λ and warm-start discrepancy D²₀ (the earlier
 * items, k-means++ seeds for any missing, and the fixed items, uniform weights: the `seeded` stage):
 *   τ = λ · max(D²₀, 0) / k.
 * Swaps: the search minimises D²(S) − τ·|S ∩ earlier|, so an earlier item is replaced only when
 * that lowers D² by more than τ (or brings in another earlier item). Descent (DescentAnchors):
 *   R(p) = τ · Σ_{j earlier} min(1, |pⱼ − qⱼ|²/ρⱼ²),
 * ρⱼ the distance from qⱼ to its snapCandidates-th nearest row: leaving the ball in which snapping
 * can still return the earlier item costs τ, as replacing it does at the swaps. Both are in units
 * of D², so λ is scale-free: the fraction of the warm start's D² that keeping all k earlier items
 * may cost (k items × τ each); λ ≥ k freezes them (no swap can gain more than D²₀). λ = 0 is a
 * plain warm start (no penalty, no snap preference, no threshold).
 */
export function stabilityThreshold(strength: number, warmStartD2: number, k: number): number {
  return (strength * Math.max(warmStartD2, 0)) / k;
}

/** Rows −1 of a start replaced by the nearest candidate of that point not used elsewhere; null when none is left. */
function fillDeleted(start: Int32Array, cand: CandidateLists, fixedRows: ReadonlySet<number>): Int32Array | null {
  const used = new Set<number>([...fixedRows, ...Array.from(start).filter((r) => r >= 0)]);
  const out = Int32Array.from(start);
  for (let j = 0; j < out.length; j++) {
    if (out[j] >= 0) continue;
    for (let r = 0; r < cand.m && out[j] < 0; r++) {
      const row = cand.index[j * cand.m + r];
      if (row >= 0 && !used.has(row)) out[j] = row;
    }
    if (out[j] < 0) return null;
    used.add(out[j]);
  }
  return out;
}

/** a then b, in a new array of their type. */
function concat<T extends Float32Array | Float64Array | Int32Array>(a: T, b: T): T {
  const out = new (a.constructor as new (length: number) => T)(a.length + b.length);
  out.set(a);
  out.set(b, a.length);
  return out;
}

/** D² ≥ 0 (h is conditionally negative definite); rounding can leave values like −1e−16. */
function nonNegative(v: number): number {
  return Math.max(0, v);
}

function median(values: number[]): number {
  const v = [...values].sort((a, b) => a - b);
  const h = v.length >> 1;
  return v.length % 2 ? v[h] : (v[h - 1] + v[h]) / 2;
}

/**
 * The result of one selection, as returned by the engine, the CLI and the API. Distances are
 * Euclidean in the selection space; D² values use the job's kernel. Documented field by field
 * in docs/result.md.
 */
export interface SelectionResult {
  version: 1;
  k: number;
  rows: number;
  /** Dimensions of the selection space. */
  dims: number;
  space: string;
  kernel: { kind: 'energy'; a: number } | { kind: 'gaussian'; sigma: number };
  /** Median pairwise distance s (the scale of the kernel and the step sizes). */
  scale: number;
  seed: number;
  weights: 'uniform' | 'optimized';
  /** The k new items in rank order: every prefix of this list (with the fixed items) is a good summary. */
  representatives: Representative[];
  /** The fixed items (SelectContext.fixed), in their given order; null without fixed items. */
  fixed: FixedRepresentative[] | null;
  /**
   * With fixed items: D² of the fixed items alone (their optimal weights, or uniform over them) and
   * of fixed + new (= discrepancy.value); gain = fixedOnly − withNew, ≥ 0 (a negative difference,
   * possible only with uniform weights, is reported as 0). Null without fixed items.
   */
  coverageGain: { fixedOnly: number; withNew: number; gain: number } | null;
  /**
   * Stable re-selection (SelectContext.previous): `previous` earlier representatives (those now
   * fixed items left out), `kept` of them chosen again, `replaced` = previous − kept, `added` new
   * items not chosen before (= k − kept), and the strength used. Null without a previous selection.
   */
  stability: { previous: number; kept: number; replaced: number; added: number; strength: number } | null;
  coverage: {
    meanDistance: number;
    p90Distance: number;
    maxDistance: number;
    coveredWithin: Array<{ radius: number; fraction: number }>;
    /** nearestRank is 0 when the nearest representative is a fixed item; nearestFixed is then its position. */
    worstCovered: Array<{ index: number; distance: number; nearestRank: number; nearestFixed?: number }>;
    labels: Record<string, { count: number; representatives: number; meanDistance: number }> | null;
  };
  discrepancy: {
    /** D² of the representatives with their weights. */
    value: number;
    /** E h(|Y − Y'|) of the data; exact, or estimated from a sample with its standard error (D² inherits it). */
    constant: { value: number; exact: boolean; sampleRows: number; standardError: number };
    random: { median: number; draws: number[] };
    /** value / random.median: below 1 is better than picking k items at random; null when random.median is 0. */
    ratioToRandom: number | null;
    /** D² of the first m representatives with uniform weights, m = 1..k, and the median over random draws. */
    prefix: Array<{ m: number; value: number; random: number }>;
    /** D² after each stage (uniform or descent weights until the final solve). */
    stages: { seeded: number; descent: number; snapped: number; refined: number; final: number };
  };
  trace: {
    iterations: number;
    stopReason: string;
    /** True when most sampled pairs were duplicates, so the median distance was 0 and a fallback scale was used. */
    scaleDegenerate: boolean;
    swaps: number;
    /**
     * Which start the kept refinement came from: the descent's snapped items, greedy forward
     * selection, or the k-means++ seeds (in a stable re-selection: the earlier items themselves).
     */
    refineStart: 'descent' | 'greedy' | 'seeds';
    weightSolver: { converged: boolean; gap: number; iterations: number } | null;
    loss: Array<[number, number]>;
    seconds: Record<string, number>;
    explainedVarianceRatio?: number[];
  };
}

export interface Representative {
  rank: number;
  /** 0-based row of the item in the input. */
  index: number;
  /** Weight in the weighted set ν (sums to 1 over representatives). */
  weight: number;
  /** Fraction of all items whose nearest representative this is (sums to 1). */
  share: number;
  count: number;
  meanDistance: number;
  p90Distance: number;
  /** Distance from the representative to the farthest item it covers. */
  radius: number;
  labels: Record<string, number> | null;
}

/**
 * A fixed item's place in the result: the coverage fields as for a representative (its weight is in
 * ν too: weights sum to 1 over fixed items and representatives).
 */
export interface FixedRepresentative extends Omit<Representative, 'rank' | 'index'> {
  /** Index in SelectContext.fixed. */
  position: number;
  /** Its row in the input, or null when it is not one of the input's rows. */
  index: number | null;
}

export type SelectPhase = 'prepare' | 'scale' | 'seed' | 'descent' | 'snap' | 'refine' | 'coverage' | 'baseline' | 'done';

export interface SelectProgress {
  phase: SelectPhase;
  /** Overall fraction done, 0..1 (approximate). */
  fraction: number;
  iteration?: number;
  maxIterations?: number;
  loss?: number;
  /** Estimated seconds left, when it can be estimated. */
  etaSeconds?: number;
}

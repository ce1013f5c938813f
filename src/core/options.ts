import { z } from 'zod';
import { CairnError } from '../errors.js';

/**
 * Options of one selection. The descriptions are the documentation (CLI help, API docs); every
 * default is stated where it is declared.
 */
export const selectOptionsSchema = z.object({
  k: z.number().int().min(1).max(100_000).describe('Number of representatives to choose.'),
  seed: z.number().int().min(0).max(2 ** 32 - 1).default(0).describe('Seed of the one random generator; the same seed gives the same result. Default 0.'),
  kernel: z.enum(['energy', 'gaussian']).default('energy').describe('energy: h(r) = sqrt(a² + r²) − a (smoothed energy distance); gaussian: MMD with k = exp(−r²/2σ²). Default energy.'),
  alpha: z.number().positive().max(10).default(0.01).describe('Energy kernel smoothing a = alpha·s, s = median pairwise distance. Keep it well below the spacing of the representatives: a large a only matches means. Default 0.01.'),
  sigmaFactor: z.number().positive().max(100).default(1).describe('Gaussian kernel width σ = sigmaFactor·s. Default 1 (the median heuristic).'),
  space: z.string().regex(/^(raw|standardize|pca:[1-9]\d*)$/).default('raw').describe('raw vectors, standardize (per column), or pca:M (top M principal axes). Default raw.'),
  weights: z.enum(['uniform', 'optimized']).default('optimized').describe('uniform: 1/k each; optimized: the weights on the simplex that minimise D² for the chosen items. Default optimized.'),
  optimizer: z.enum(['adam', 'sgd']).default('adam').describe('Descent method on the k points. Default adam.'),
  batchSize: z.number().int().min(1).max(1_000_000).default(2048).describe('Rows per minibatch (all rows when the dataset is smaller). Default 2048.'),
  maxIterations: z.number().int().min(0).max(1_000_000).nullable().default(null).describe('Descent iteration budget; null = automatic: round(30000 / k) clamped to 150..1500, which keeps the descent\'s work about constant across k (the swap refinement over real items does more of the work as k grows). Default null.'),
  timeBudgetSeconds: z.number().positive().nullable().default(null).describe('Wall-clock budget of the descent in seconds; null = none. Default null.'),
  learningRate: z.number().positive().max(10).default(0.05).describe('Initial step in units of the data scale s (per coordinate for adam, divided by √d). Default 0.05.'),
  finalLearningRateFraction: z.number().positive().max(1).default(0.01).describe('The step decays geometrically to this fraction by the end of the budget. Default 0.01.'),
  plateauTolerance: z.number().min(0).max(1).default(1e-5).describe('Stop early when the running loss falls by less than this fraction of its first value over a window of 100 iterations (checked after half the budget); 0 = never. Default 1e-5.'),
  snapCandidates: z.number().int().min(1).max(1000).default(16).describe('Nearest real items considered per point when snapping and refining. Default 16.'),
  refine: z.boolean().default(true).describe('Swap representatives for candidate items while D² drops. Default true.'),
  refinePoolEntries: z.number().int().min(1000).max(1e9).default(5e7).describe('Cap on swap candidates × k (the size of the kernel table the refinement keeps). Candidates are every row up to exactConstantMaxRows (else the constant term\'s row sample) plus each point\'s nearest items. Default 50,000,000.'),
  refineSampleRows: z.number().int().min(100).default(50_000).describe('Rows (a sample when the dataset is larger) for the weight solves during the descent, the stage values in the trace and the random baseline. Default 50,000.'),
  randomDraws: z.number().int().min(1).max(101).default(7).describe('Random k-subsets drawn for the "vs random" baseline (their median is used). Default 7.'),
  worstCount: z.number().int().min(0).max(10_000).default(20).describe('How many worst-covered items to list. Default 20.'),
  radius: z.number().positive().nullable().default(null).describe('Coverage radius in the selection space; the covered fraction is also reported at 0.25, 0.5, 0.75 and 1 × s. Default null.'),
  exactConstantMaxRows: z.number().int().min(2).default(20_000).describe('Up to this many rows the data\'s self term E h(|Y−Y\'|) is computed over all pairs; above, estimated from a sample. Default 20,000.'),
});

export type SelectOptionsInput = z.input<typeof selectOptionsSchema>;
export type SelectOptions = z.output<typeof selectOptionsSchema>;

/** Validates and fills defaults; bad options become INVALID_ARGUMENT naming each field. */
/** The automatic descent budget (see maxIterations). */
export function autoIterations(k: number): number {
  return Math.min(1500, Math.max(150, Math.round(30_000 / k)));
}

export function parseSelectOptions(input: SelectOptionsInput): SelectOptions {
  const parsed = selectOptionsSchema.safeParse(input);
  if (parsed.success) return parsed.data;
  const issues = parsed.error.issues.map((i) => ({ field: i.path.join('.'), message: i.message }));
  throw new CairnError('INVALID_ARGUMENT', issues.map((i) => `${i.field}: ${i.message}`).join('; '), { issues });
}

import { attr, DataType, OnnxGraphBuilder as Graph } from './onnx-builder.js';

const FLOAT = DataType.FLOAT;
const INT32 = DataType.INT32;
const INT64 = DataType.INT64;

export type KernelKind = 'energy' | 'gaussian';
export type GraphKey =
  | 'sqDistances'
  | `kernelMatrix:${KernelKind}`
  | `kernelMatrixPrepared:${KernelKind}`
  | `kernelColumnSums:${KernelKind}`
  | `kernelSums:${KernelKind}`
  | `dataTerm:${KernelKind}`
  | `dataTermPrepared:${KernelKind}`
  | 'assign'
  | `assign:${KernelKind}`
  | 'nearestRows'
  | `gemm:${'n' | 't'}${'n' | 't'}`;

/** Row-wise squared norms as a column [rows, 1] (one pass, no rows×d temporary). */
function sqNorms(g: Graph, m: string): string {
  return g.op('ReduceSumSquare', [m], [attr.ints('axes', [1]), attr.i('keepdims', 1)]);
}

/** A [rows, 1] column of ones shaped like the rows of m. */
function onesColumn(g: Graph, m: string): string {
  const rows = g.op('Shape', [m], [attr.i('start', 0), attr.i('end', 1)]);
  const shape = g.op('Concat', [rows, g.int64s([1])], [attr.i('axis', 0)]);
  return g.op('ConstantOfShape', [shape], [attr.t('value', { dataType: FLOAT, dims: [1], floatData: [1] })]);
}

/**
 * Augmented operands so that one Gemm yields |x|² + |p|² − 2x·p with no n×k broadcast pass:
 *   X⁺ = [X, |x|², 1],  P⁺ = [−2P, 1, |p|² + shift].
 * `shift` folds the energy kernel's a² into the same product. X⁺'s last column also makes
 * G·X⁺ return Σ_i g_ij next to the gradient product.
 */
function augmented(g: Graph, x: string, p: string, shift?: string, prepared?: string): { xAug: string; pAug: string } {
  // A prepared X⁺ (rows already [x, |x|², 1]) saves building it per call: a copy of the block.
  const xAug = prepared ?? g.op('Concat', [x, sqNorms(g, x), onesColumn(g, x)], [attr.i('axis', 1)]);
  let pp = sqNorms(g, p);
  if (shift) pp = g.op('Add', [pp, shift]);
  const pAug = g.op('Concat', [g.op('Mul', [p, g.floats([-2], [])]), onesColumn(g, p), pp], [attr.i('axis', 1)]);
  return { xAug, pAug };
}

/**
 * Layout of the n×k block. 'rows' = [n, k] (row-wise results: argmin, kernel matrix);
 * 'points' = [k, n], for per-point reductions: the sums then run along contiguous rows and the
 * second product G·X⁺ is a plain (untransposed) Gemm, measurably faster in MLAS than Gᵀ·X⁺.
 */
type Layout = 'rows' | 'points';

function product(g: Graph, xAug: string, pAug: string, layout: Layout): string {
  const [l, r] = layout === 'rows' ? [xAug, pAug] : [pAug, xAug];
  return g.op('Gemm', [l, r], [attr.i('transB', 1)]);
}

/** Clamped squared distances; ORT fuses the Gemm→Relu pair into one kernel (FusedGemm). */
function distances(g: Graph, x: string, p: string, layout: Layout): string {
  const { xAug, pAug } = augmented(g, x, p);
  return g.op('Relu', [product(g, xAug, pAug, layout)]);
}

interface KernelBlock {
  /** h over the block, or null when the kernel is cheaper to sum from `e` (Gaussian: h = −e). */
  h: string | null;
  /** energy: g = 1/S; gaussian: e = exp(−D/2σ²), with g = e/σ². */
  e: string;
  xAug: string;
  /** Gaussian only: 1/σ², applied to the k-vectors rather than to the block. */
  invS2: string | null;
}

/** Energy: S = sqrt(max(D + a², a²)) from one Gemm whose bias column already holds a²; h = S − a, g = 1/S. */
function energyBlock(g: Graph, x: string, p: string, a: string, layout: Layout, prepared?: string): KernelBlock {
  const a2 = g.op('Mul', [a, a]);
  const { xAug, pAug } = augmented(g, x, p, a2, prepared);
  const s = g.op('Sqrt', [g.op('Max', [product(g, xAug, pAug, layout), a2])]);
  return { h: g.op('Sub', [s, a]), e: g.op('Reciprocal', [s]), xAug, invS2: null };
}

/** Gaussian: E = exp(min(c·D, 0)) with c = −1/2σ² folded into P⁺ (k×d work, not n×k). */
function gaussianBlock(g: Graph, x: string, p: string, sigma: string, layout: Layout, prepared?: string): KernelBlock {
  const invS2 = g.op('Reciprocal', [g.op('Mul', [sigma, sigma])]);
  const c = g.op('Mul', [invS2, g.floats([-0.5], [])]);
  const { xAug, pAug } = augmented(g, x, p, undefined, prepared);
  const cd = g.op('Min', [product(g, xAug, g.op('Mul', [pAug, c]), layout), g.floats([0], [])]);
  return { h: null, e: g.op('Exp', [cd]), xAug, invS2 };
}

function kernelBlock(g: Graph, kind: KernelKind, x: string, p: string, param: string, layout: Layout, prepared?: string): KernelBlock {
  return kind === 'energy' ? energyBlock(g, x, p, param, layout, prepared) : gaussianBlock(g, x, p, param, layout, prepared);
}

/** Σ over one axis of a 2-D block, dropping it. */
function sum(g: Graph, m: string, axis: number): string {
  return g.op('ReduceSum', [m, g.int64s([axis])], [attr.i('keepdims', 0)]);
}

/** Σ of h along `axis`; for the Gaussian −Σe, negated on the vector. */
function hSum(g: Graph, block: KernelBlock, axis: number): string {
  return block.h ? sum(g, block.h, axis) : g.op('Neg', [sum(g, block.e, axis)]);
}

const dataInputs = (g: Graph): [string, string] => [g.input('x', FLOAT, ['n', 'd']), g.input('p', FLOAT, ['k', 'd'])];
/** Prepared rows X⁺ = [X, |x|², 1] (n × (d+2)) instead of X. */
const preparedInputs = (g: Graph): [string, string] => [g.input('xaug', FLOAT, ['n', 'e']), g.input('p', FLOAT, ['k', 'd'])];
const kernelParam = (g: Graph, kind: KernelKind): string => g.input(kind === 'energy' ? 'a' : 'sigma', FLOAT, []);

/** Columns [from, to) of m; the bounds are 1-element int64 tensors, computed in-graph from the symbolic d. */
function sliceCols(g: Graph, m: string, from: string, to: string): string {
  return g.op('Slice', [m, from, to, g.int64s([1])]);
}

type Builder = (g: Graph) => void;
const dataTermPrepared = (g: Graph, kind: KernelKind): void => dataTerm(g, kind, true);
const kernelMatrixPrepared = (g: Graph, kind: KernelKind): void => kernelMatrix(g, kind, true);
const perKernel = { kernelMatrix, kernelMatrixPrepared, kernelColumnSums, kernelSums, dataTerm, dataTermPrepared, assign };
const builders = {
  ...Object.fromEntries(
    (['energy', 'gaussian'] as const).flatMap((kind) => Object.entries(perKernel).map(([op, f]) => [`${op}:${kind}`, (g: Graph) => f(g, kind)])),
  ),
  ...Object.fromEntries(['nn', 'nt', 'tn', 'tt'].map((t) => [`gemm:${t}`, (g: Graph) => gemm(g, t[0] === 't', t[1] === 't')])),
  sqDistances(g: Graph) {
    const [x, p] = dataInputs(g);
    g.output('d2', FLOAT, ['n', 'k'], distances(g, x, p, 'rows'));
  },
  assign: (g: Graph) => assign(g),
  nearestRows(g: Graph) {
    const [x, p] = dataInputs(g);
    const m = g.input('m', INT64, [1]);
    const topkAttrs = [attr.i('axis', 1), attr.i('largest', 0), attr.i('sorted', 1)];
    const [values, indices] = g.opN('TopK', [distances(g, x, p, 'points'), m], topkAttrs, ['topk_values', 'topk_indices']);
    g.output('sqDist', FLOAT, ['k', 'm'], values);
    g.output('index', INT32, ['k', 'm'], g.op('Cast', [indices], [attr.i('to', INT32)]));
  },
} as Record<GraphKey, Builder>;

function kernelMatrix(g: Graph, kind: KernelKind, prepared = false): void {
  const [x, p] = prepared ? preparedInputs(g) : dataInputs(g);
  const block = kernelBlock(g, kind, x, p, kernelParam(g, kind), 'rows', prepared ? x : undefined);
  g.output('h', FLOAT, ['n', 'k'], block.h ?? g.op('Neg', [block.e]));
}

function kernelColumnSums(g: Graph, kind: KernelKind): void {
  const [x, p] = dataInputs(g);
  const block = kernelBlock(g, kind, x, p, kernelParam(g, kind), 'points');
  g.output('hSum', FLOAT, ['k'], hSum(g, block, 1));
}

function kernelSums(g: Graph, kind: KernelKind): void {
  const [x, p] = dataInputs(g);
  const block = kernelBlock(g, kind, x, p, kernelParam(g, kind), 'points');
  g.output('hSum', FLOAT, ['k'], hSum(g, block, 1));
  g.output('rowSum', FLOAT, ['n'], hSum(g, block, 0));
}

function dataTerm(g: Graph, kind: KernelKind, prepared = false): void {
  // Prepared: the rows come as X⁺ = [X, |x|², 1] (n × (d+2)); the graph never sees X alone.
  const [x, p] = prepared ? preparedInputs(g) : dataInputs(g);
  const block = kernelBlock(g, kind, x, p, kernelParam(g, kind), 'points', prepared ? x : undefined);
  // G·X⁺ = [G·X | G·|x|² | Σ_i g]: the gradient product and gSum from one Gemm.
  const prod = g.op('Gemm', [block.e, block.xAug]);
  const d = g.op('Shape', [p], [attr.i('start', 1), attr.i('end', 2)]);
  const gsCol = sliceCols(g, prod, g.op('Add', [d, g.int64s([1])]), g.op('Add', [d, g.int64s([2])]));
  let gSum = g.op('Reshape', [gsCol, g.int64s([-1])]);
  let gx = sliceCols(g, prod, g.int64s([0]), d);
  // Gaussian: Σh = −Σe is the same column as Σg·σ², so no reduction over the block at all.
  const hs = block.invS2 ? g.op('Neg', [gSum]) : hSum(g, block, 1);
  if (block.invS2) {
    gSum = g.op('Mul', [gSum, block.invS2]);
    gx = g.op('Mul', [gx, block.invS2]);
  }
  g.output('hSum', FLOAT, ['k'], hs);
  g.output('gSum', FLOAT, ['k'], gSum);
  g.output('gx', FLOAT, ['k', 'd'], gx);
}

function assign(g: Graph, kind?: KernelKind): void {
  const [x, p] = dataInputs(g);
  const d = distances(g, x, p, 'rows');
  // TopK with K = 1 gives the minimum and its index (lower index on ties, as ArgMin) in one pass
  // over the n×k block, where ArgMin + ReduceMin took two and ArgMin alone was slower (3.3 vs 2 ms).
  const topkAttrs = [attr.i('axis', 1), attr.i('largest', 0), attr.i('sorted', 1)];
  const [values, indices] = g.opN('TopK', [d, g.int64s([1])], topkAttrs, ['top1_values', 'top1_indices']);
  const flat = g.int64s([-1]);
  g.output('index', INT32, ['n'], g.op('Cast', [g.op('Reshape', [indices, flat])], [attr.i('to', INT32)]));
  g.output('sqDist', FLOAT, ['n'], g.op('Reshape', [values, flat]));
  if (kind) {
    // h from the clamped D already in hand: a few elementwise passes are cheaper than a second Gemm.
    const param = kernelParam(g, kind);
    const sq = g.op('Mul', [param, param]);
    const h =
      kind === 'energy'
        ? g.op('Sub', [g.op('Sqrt', [g.op('Add', [d, sq])]), param])
        : g.op('Exp', [g.op('Mul', [d, g.op('Div', [g.floats([-0.5], []), sq])])]);
    const sums = sum(g, h, 0);
    g.output('hSum', FLOAT, ['k'], kind === 'energy' ? sums : g.op('Neg', [sums]));
  }
}

function gemm(g: Graph, transA: boolean, transB: boolean): void {
  const a = g.input('a', FLOAT, ['ar', 'ac']);
  const b = g.input('b', FLOAT, ['br', 'bc']);
  const c = g.op('Gemm', [a, b], [attr.i('transA', transA ? 1 : 0), attr.i('transB', transB ? 1 : 0)]);
  g.output('c', FLOAT, [transA ? 'ac' : 'ar', transB ? 'br' : 'bc'], c);
}

/** The serialized ModelProto of one operation. Inputs/outputs are named as in the builders above. */
export function buildGraph(key: GraphKey): Uint8Array {
  const g = new Graph();
  builders[key](g);
  return g.encode(`cairn_${key.replace(/:/g, '_')}`);
}

export const GRAPH_KEYS = Object.keys(builders) as GraphKey[];

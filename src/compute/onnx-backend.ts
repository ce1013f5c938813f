import os from 'node:os';
import * as ort from 'onnxruntime-node';
import { CairnError, requireArg } from '../errors.js';
import type { Assignment, ComputeBackend, DataTermStats, NearestRows, KernelSums } from './backend.js';
import type { KernelSpec } from './kernel-spec.js';
import { buildGraph, GRAPH_KEYS, type GraphKey } from './onnx-graphs.js';
import { ReferenceBackend } from './reference-backend.js';

export interface OnnxBackendOptions {
  /** ORT intra-op threads (MLAS Gemm and elementwise loops). Default: os.availableParallelism(). */
  threads?: number;
  /**
   * Calls whose work (rows × points × dims) is below this run on the ReferenceBackend instead.
   * A session.run has ≈ 30–50 µs of fixed cost (feeds, shape inference, output copies, the
   * setImmediate hop, waking the pool), which plain JS matches at n·k·d ≈ 2e4 (measured on
   * assign; dataTerm breaks even lower). The default 1e5 keeps calls up to ~0.3 ms on the
   * reference on purpose: that costs at most ~0.5 ms a call and buys float64 without the
   * |x|²+|p|²−2x·p cancellation on the small blocks (quadratic forms) where it matters most.
   * 0 sends every non-empty call to ONNX (the conformance test).
   */
  minWork?: number;
  /**
   * Most floats in one n×k intermediate per session.run; larger calls are split into row (or,
   * for nearestRows, point) blocks and the partial sums added in float64. ORT's arena keeps each
   * session's peak allocation for the session's lifetime, so this bounds resident memory at about
   * four intermediates (energy dataTerm) × 4 bytes × blockElems per session. Default 2^21 (8 MB
   * each): at 8192×1000×256, 2^19…2^24 timed the same within noise, so memory decides.
   */
  blockElems?: number;
  /**
   * Keep ORT's CPU memory arena (default true): each session then holds its peak allocation for
   * its lifetime, up to ~4 × 4 × blockElems bytes per graph kind, which is faster for repeated
   * calls. false frees every call's buffers when it returns (for a tight memory budget).
   */
  memoryArena?: boolean;
}

/** A call shape to warm up for; m is nearestRows' m (default min(n, 8)). */
export type WarmUpShape = { n: number; k: number; d: number; m?: number };

type Feeds = Record<string, ort.Tensor>;

/**
 * The ComputeBackend on onnxruntime's CPU provider: one small graph per operation (see
 * onnx-graphs.ts) with symbolic dims, so each session is built once and serves every shape and
 * kernel parameter. Work is float32; sums come back as float64 arrays but are float32 accurate.
 *
 * session.run executes synchronously on the JS thread (the binding only defers it with
 * setImmediate), so a long call blocks the event loop; callers that must stay responsive should
 * keep blocks modest or run the backend in a worker.
 */
export class OnnxBackend implements ComputeBackend {
  readonly name = 'onnx';
  private readonly reference = new ReferenceBackend();
  private readonly sessions = new Map<GraphKey, Promise<ort.InferenceSession>>();
  private disposed = false;

  private constructor(
    readonly threads: number,
    readonly minWork: number,
    readonly blockElems: number,
    readonly memoryArena: boolean,
  ) {}

  static async create(options: OnnxBackendOptions = {}): Promise<OnnxBackend> {
    const { threads = os.availableParallelism(), minWork = 1e5, blockElems = 2 ** 21, memoryArena = true } = options;
    requireArg(Number.isInteger(threads) && threads >= 1, 'threads', 'an integer ≥ 1', threads);
    requireArg(Number.isFinite(minWork) && minWork >= 0, 'minWork', 'a finite number ≥ 0', minWork);
    requireArg(Number.isInteger(blockElems) && blockElems >= 1, 'blockElems', 'an integer ≥ 1', blockElems);
    return new OnnxBackend(threads, minWork, blockElems, memoryArena);
  }

  async sqDistances(x: Float32Array, n: number, p: Float32Array, k: number, d: number): Promise<Float32Array> {
    checkPair(x, n, p, k, d);
    if (this.tiny(n * k * d)) return this.reference.sqDistances(x, n, p, k, d);
    const out = await this.run('sqDistances', { x: f32(x, [n, d]), p: f32(p, [k, d]) });
    return out.d2.data as Float32Array;
  }

  async kernelMatrix(a: Float32Array, na: number, b: Float32Array, nb: number, d: number, kernel: KernelSpec): Promise<Float64Array> {
    checkPair(a, na, b, nb, d);
    checkKernel(kernel);
    if (this.tiny(na * nb * d)) return this.reference.kernelMatrix(a, na, b, nb, d, kernel);
    const out = await this.run(`kernelMatrix:${kernel.kind}`, { x: f32(a, [na, d]), p: f32(b, [nb, d]), ...param(kernel) });
    return new Float64Array(out.h.data as Float32Array);
  }

  async kernelMatrixPrepared(aAug: Float32Array, na: number, b: Float32Array, nb: number, d: number, kernel: KernelSpec): Promise<Float64Array> {
    checkPrepared(aAug, na, b, nb, d);
    checkKernel(kernel);
    if (this.tiny(na * nb * d)) return this.reference.kernelMatrixPrepared(aAug, na, b, nb, d, kernel);
    if (nb === 1) {
      // One point: ORT's matrix product by a single column is markedly slower than by two (a 54,000-row
      // pool, d = 128, 2 threads: 5.2 vs 3.9 ms; 20,000 rows: 2.8 vs 1.5 ms), so it goes in twice.
      const twice = new Float32Array(2 * d);
      twice.set(b.subarray(0, d));
      twice.set(b.subarray(0, d), d);
      const out = await this.run(`kernelMatrixPrepared:${kernel.kind}`, { xaug: f32(aAug, [na, d + 2]), p: f32(twice, [2, d]), ...param(kernel) });
      const h = out.h.data as Float32Array;
      const col = new Float64Array(na);
      for (let i = 0; i < na; i++) col[i] = h[2 * i];
      return col;
    }
    const out = await this.run(`kernelMatrixPrepared:${kernel.kind}`, { xaug: f32(aAug, [na, d + 2]), p: f32(b, [nb, d]), ...param(kernel) });
    return new Float64Array(out.h.data as Float32Array);
  }

  async kernelColumnSums(x: Float32Array, n: number, c: Float32Array, m: number, d: number, kernel: KernelSpec): Promise<Float64Array> {
    checkPair(x, n, c, m, d);
    checkKernel(kernel);
    if (this.tiny(n * m * d)) return this.reference.kernelColumnSums(x, n, c, m, d, kernel);
    const sums = new Float64Array(m);
    const fixed = { p: f32(c, [m, d]), ...param(kernel) };
    for (const [r0, r1] of this.blocks(n, m)) {
      const out = await this.run(`kernelColumnSums:${kernel.kind}`, { x: rowBlock(x, r0, r1, d), ...fixed });
      addInto(sums, out.hSum.data as Float32Array);
    }
    return sums;
  }

  async kernelSums(x: Float32Array, n: number, c: Float32Array, m: number, d: number, kernel: KernelSpec): Promise<KernelSums> {
    checkPair(x, n, c, m, d);
    checkKernel(kernel);
    if (this.tiny(n * m * d)) return this.reference.kernelSums(x, n, c, m, d, kernel);
    const colSums = new Float64Array(m);
    const rowSums = new Float64Array(n);
    const fixed = { p: f32(c, [m, d]), ...param(kernel) };
    for (const [r0, r1] of this.blocks(n, m)) {
      const out = await this.run(`kernelSums:${kernel.kind}`, { x: rowBlock(x, r0, r1, d), ...fixed });
      addInto(colSums, out.hSum.data as Float32Array);
      rowSums.set(out.rowSum.data as Float32Array, r0);
    }
    return { rowSums, colSums };
  }

  async dataTerm(x: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec): Promise<DataTermStats> {
    checkPair(x, n, p, k, d);
    checkKernel(kernel);
    if (this.tiny(n * k * d)) return this.reference.dataTerm(x, n, p, k, d, kernel);
    return this.dataTermBlocks(n, p, k, d, kernel, `dataTerm:${kernel.kind}`, (r0, r1) => ({ x: rowBlock(x, r0, r1, d) }));
  }

  async dataTermPrepared(xAug: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec): Promise<DataTermStats> {
    checkPrepared(xAug, n, p, k, d);
    checkKernel(kernel);
    if (this.tiny(n * k * d)) return this.reference.dataTermPrepared(xAug, n, p, k, d, kernel);
    return this.dataTermBlocks(n, p, k, d, kernel, `dataTermPrepared:${kernel.kind}`, (r0, r1) => ({ xaug: rowBlock(xAug, r0, r1, d + 2) }));
  }

  /** The data term over row blocks, partial sums added in float64. */
  private async dataTermBlocks(n: number, p: Float32Array, k: number, d: number, kernel: KernelSpec, key: GraphKey, rows: (r0: number, r1: number) => Feeds): Promise<DataTermStats> {
    const [hSum, gSum] = [new Float64Array(k), new Float64Array(k)];
    let [gx, gx64]: [Float32Array | null, Float64Array | null] = [null, null];
    const fixed = { p: f32(p, [k, d]), ...param(kernel) };
    for (const [r0, r1] of this.blocks(n, k)) {
      const out = await this.run(key, { ...rows(r0, r1), ...fixed });
      addInto(hSum, out.hSum.data as Float32Array);
      addInto(gSum, out.gSum.data as Float32Array);
      if (r0 === 0 && r1 === n) gx = out.gx.data as Float32Array;
      else addInto((gx64 ??= new Float64Array(k * d)), out.gx.data as Float32Array);
    }
    return { hSum, gSum, gx: gx ?? Float32Array.from(gx64 ?? []) };
  }

  async assign(x: Float32Array, n: number, p: Float32Array, k: number, d: number, kernel?: KernelSpec): Promise<Assignment> {
    checkPair(x, n, p, k, d);
    requireArg(k >= 1 || n === 0, 'k', 'at least 1 when there are rows to assign', k);
    if (kernel) checkKernel(kernel);
    if (this.tiny(n * k * d)) return this.reference.assign(x, n, p, k, d, kernel);
    const [index, sqDist, hSum] = [new Int32Array(n), new Float32Array(n), kernel ? new Float64Array(k) : null];
    const fixed = { p: f32(p, [k, d]), ...(kernel ? param(kernel) : {}) };
    for (const [r0, r1] of this.blocks(n, k)) {
      const out = await this.run(kernel ? `assign:${kernel.kind}` : 'assign', { x: rowBlock(x, r0, r1, d), ...fixed });
      index.set(out.index.data as Int32Array, r0);
      sqDist.set(out.sqDist.data as Float32Array, r0);
      if (hSum) addInto(hSum, out.hSum.data as Float32Array);
    }
    return { index, sqDist, hSum };
  }

  /**
   * TopK orders equal values by lower index, as the reference does; but distances are float32
   * here, so rows whose float64 distances differ by less than the rounding may swap places.
   */
  async nearestRows(x: Float32Array, n: number, p: Float32Array, k: number, d: number, m: number): Promise<NearestRows> {
    checkPair(x, n, p, k, d);
    requireArg(Number.isInteger(m) && m >= 0 && m <= n, 'm', `an integer in [0, n = ${n}]`, m);
    if (m === 0 || this.tiny(n * k * d)) return this.reference.nearestRows(x, n, p, k, d, m);
    const [index, sqDist] = [new Int32Array(k * m), new Float32Array(k * m)];
    const fixed = { x: f32(x, [n, d]), m: int64(m) };
    // Each point's ranking is independent, so the k×n block is split over points, not rows.
    for (const [j0, j1] of this.blocks(k, n)) {
      const out = await this.run('nearestRows', { p: rowBlock(p, j0, j1, d), ...fixed });
      index.set(out.index.data as Int32Array, j0 * m);
      sqDist.set(out.sqDist.data as Float32Array, j0 * m);
    }
    return { index, sqDist };
  }

  async gemm(a: Float32Array, aRows: number, aCols: number, b: Float32Array, bRows: number, bCols: number, transA: boolean, transB: boolean): Promise<Float32Array> {
    for (const [name, v] of Object.entries({ aRows, aCols, bRows, bCols })) checkDim(name, v);
    const [rows, inner, cols, innerB] = [transA ? aCols : aRows, transA ? aRows : aCols, transB ? bRows : bCols, transB ? bCols : bRows];
    if (innerB !== inner) throw new CairnError('DIMENSION_MISMATCH', `gemm: inner dimensions differ (${inner} vs ${innerB}).`);
    checkLength('a', a, aRows * aCols);
    checkLength('b', b, bRows * bCols);
    if (this.tiny(rows * inner * cols)) return this.reference.gemm(a, aRows, aCols, b, bRows, bCols, transA, transB);
    const key: GraphKey = `gemm:${transA ? 't' : 'n'}${transB ? 't' : 'n'}`;
    const out = await this.run(key, { a: f32(a, [aRows, aCols]), b: f32(b, [bRows, bCols]) });
    return out.c.data as Float32Array;
  }

  /**
   * Builds every session (or those in `keys`) and runs it once at the block shape a call of this
   * shape will use, so the first real call pays neither session creation (graph optimisation)
   * nor the arena's first allocations.
   */
  async warmUp(shapes: readonly WarmUpShape[], keys: readonly GraphKey[] = GRAPH_KEYS): Promise<void> {
    const zeros = (rows: number, cols: number) => f32(new Float32Array(rows * cols), [rows, cols]);
    for (const { n, k, d, m = Math.min(8, n) } of shapes) {
      for (const v of [n, k, d]) requireArg(Number.isInteger(v) && v >= 1, 'warm-up shape', 'positive integers n, k, d', { n, k, d });
      for (const key of keys) {
        const [op, kind = ''] = key.split(':');
        if (op === 'gemm') {
          // op(A) is n×d and op(B) d×k, stored transposed where the key says so.
          await this.run(key, { a: kind[0] === 't' ? zeros(d, n) : zeros(n, d), b: kind[1] === 't' ? zeros(k, d) : zeros(d, k) });
          continue;
        }
        const rowBlocked = op === 'dataTerm' || op === 'dataTermPrepared' || op === 'assign' || op === 'kernelColumnSums' || op === 'kernelSums';
        const feeds: Feeds = { x: zeros(rowBlocked ? Math.min(n, this.blockRows(k)) : n, d), p: zeros(k, d) };
        if (op === 'nearestRows') Object.assign(feeds, { p: zeros(Math.min(k, this.blockRows(n)), d), m: int64(Math.min(m, n)) });
        if (op === 'dataTermPrepared' || op === 'kernelMatrixPrepared') {
          feeds.xaug = zeros(Math.min(n, this.blockRows(k)), d + 2);
          delete feeds.x;
        }
        if (kind === 'energy') Object.assign(feeds, param({ kind, a: 1 }));
        if (kind === 'gaussian') Object.assign(feeds, param({ kind, sigma: 1 }));
        await this.run(key, feeds);
      }
    }
  }

  /** Rows per session.run when the other side of the block has `cols` entries. */
  private blockRows(cols: number): number {
    return Math.max(1, Math.floor(this.blockElems / Math.max(1, cols)));
  }

  /** [start, end) ranges covering `rows` in blocks of blockRows(cols). */
  private *blocks(rows: number, cols: number): Generator<[number, number]> {
    const step = this.blockRows(cols);
    for (let r = 0; r < rows; r += step) yield [r, Math.min(rows, r + step)];
  }

  async dispose(): Promise<void> {
    this.disposed = true;
    const pending = [...this.sessions.values()];
    this.sessions.clear();
    await Promise.all(pending.map(async (s) => (await s.catch(() => null))?.release()));
  }

  /** Empty shapes go to the reference too: ORT's zero-sized tensors are legal but not worth a session. */
  private tiny(work: number): boolean {
    return work === 0 || work < this.minWork;
  }

  private session(key: GraphKey): Promise<ort.InferenceSession> {
    let s = this.sessions.get(key);
    if (!s) {
      s = ort.InferenceSession.create(buildGraph(key), {
        intraOpNumThreads: this.threads,
        interOpNumThreads: 1,
        graphOptimizationLevel: 'all',
        executionMode: 'sequential',
        // Memory patterns are cached per input shape; ours change with every block and batch, so
        // the cache would only grow (and it made the second run as slow as the first). The arena
        // still recycles buffers.
        enableMemPattern: false,
        enableCpuMemArena: this.memoryArena,
        // Every session has its own intra-op pool; spinning workers of the previous call's session
        // would steal cores from the next one (measured ≈ 2× slower for dataTerm, assign and nearestRows in turn).
        extra: { session: { intra_op: { allow_spinning: '0' } } },
      });
      // A failed creation is not cached, so a later call can retry.
      s.catch(() => this.sessions.delete(key));
      this.sessions.set(key, s);
    }
    return s;
  }

  private async run(key: GraphKey, feeds: Feeds): Promise<ort.InferenceSession.OnnxValueMapType> {
    if (this.disposed) throw new CairnError('COMPUTE_BACKEND_FAILED', 'The ONNX backend has been disposed.');
    try {
      return await (await this.session(key)).run(feeds);
    } catch (cause) {
      const message = `ONNX graph ${key} failed: ${cause instanceof Error ? cause.message : String(cause)}`;
      throw new CairnError('COMPUTE_BACKEND_FAILED', message, { graph: key }, { cause });
    }
  }
}

/**
 * Wraps the first rows×cols values without copying. ORT rejects SharedArrayBuffer-backed arrays,
 * so those (only those) are copied into a plain buffer first.
 */
function f32(data: Float32Array, dims: [number, number]): ort.Tensor {
  let view = data.length === dims[0] * dims[1] ? data : data.subarray(0, dims[0] * dims[1]);
  if (!(view.buffer instanceof ArrayBuffer)) view = new Float32Array(view);
  return new ort.Tensor('float32', view, dims);
}

function rowBlock(m: Float32Array, r0: number, r1: number, d: number): ort.Tensor {
  return f32(m.subarray(r0 * d, r1 * d), [r1 - r0, d]);
}

function addInto(acc: Float64Array, part: Float32Array): void {
  for (let i = 0; i < acc.length; i++) acc[i] += part[i];
}

function int64(v: number): ort.Tensor {
  return new ort.Tensor('int64', BigInt64Array.of(BigInt(v)), [1]);
}

/** Kernel parameters are graph inputs (0-d tensors), so one session serves every a or σ. */
function param(kernel: KernelSpec): Feeds {
  if (kernel.kind === 'energy') return { a: new ort.Tensor('float32', Float32Array.of(kernel.a), []) };
  return { sigma: new ort.Tensor('float32', Float32Array.of(kernel.sigma), []) };
}

const checkDim = (name: string, v: number) => requireArg(Number.isInteger(v) && v >= 0, name, 'an integer ≥ 0', v);

function checkLength(name: string, arr: Float32Array, needed: number): void {
  // Longer arrays are accepted (a reused block buffer with a short last block); the prefix is used.
  if (arr.length < needed) {
    throw new CairnError('DIMENSION_MISMATCH', `${name} has ${arr.length} values; ${needed} needed.`, { name, length: arr.length, needed });
  }
}

function checkPair(x: Float32Array, n: number, p: Float32Array, k: number, d: number): void {
  for (const [name, v] of Object.entries({ n, k, d })) checkDim(name, v);
  checkLength('x', x, n * d);
  checkLength('p', p, k * d);
}

/** Prepared rows hold d + 2 values each: [x, |x|², 1]. */
function checkPrepared(xAug: Float32Array, n: number, p: Float32Array, k: number, d: number): void {
  for (const [name, v] of Object.entries({ n, k, d })) checkDim(name, v);
  checkLength('xAug', xAug, n * (d + 2));
  checkLength('p', p, k * d);
}

function checkKernel(kernel: KernelSpec): void {
  if (kernel.kind === 'energy') requireArg(Number.isFinite(kernel.a) && kernel.a >= 0, 'kernel.a', 'a finite number ≥ 0', kernel.a);
  else requireArg(Number.isFinite(kernel.sigma) && kernel.sigma > 0, 'kernel.sigma', 'a finite number > 0', kernel.sigma);
}

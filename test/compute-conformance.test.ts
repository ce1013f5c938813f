import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend, DataTermStats } from '../src/compute/backend.js';
import { createBackend } from '../src/compute/create-backend.js';
import { kernelG, kernelH, type KernelSpec } from '../src/compute/kernel-spec.js';
import { OnnxBackend } from '../src/compute/onnx-backend.js';
import { ReferenceBackend, sqDistancesSync } from '../src/compute/reference-backend.js';
import { CairnError } from '../src/errors.js';
import { prng as mulberry32 } from './data/fixtures.js';
import { prepareRows } from '../src/compute/prepared-rows.js';

/*
 * Every backend against the float64 reference, on seeded random shapes. Backends compute in
 * float32, so tolerances are derived, not guessed:
 *  - distances: |x|² + |p|² − 2x·p cancels when x ≈ p, so the error scales with the squared
 *    norms, not with the distance: |Δs| ≤ 64·ε₃₂·(|x|² + |p|²) (+ a tiny floor);
 *  - h and g: the distance error pushed through the (monotone) kernel, h(s ± Δs), plus a few ε
 *    of rounding on the value itself (for the energy kernel relative to √(a² + s), since h = S − a);
 *  - sums: relative 1e-4 of Σ|term| (float32 accumulation over ≤ ~1000 terms) plus the summed
 *    per-term bounds. A wrong factor, a transposed operand or a missing clamp exceeds these by orders.
 */
const EPS32 = 2 ** -23;
const REL_SUM = 1e-4;

interface Case {
  name: string;
  n: number;
  k: number;
  d: number;
  x: Float32Array;
  p: Float32Array;
}

/** Data around `offset` (large offsets stress the cancellation); with `dup`, some points equal rows and some rows repeat. */
function makeCase(seed: number, n: number, k: number, d: number, opts: { dup?: boolean; offset?: number } = {}): Case {
  const rnd = mulberry32(seed);
  const off = opts.offset ?? 0;
  const x = Float32Array.from({ length: n * d }, () => off + rnd() * 2 - 1);
  const p = Float32Array.from({ length: k * d }, () => off + rnd() * 2 - 1);
  if (opts.dup) {
    for (let i = 1; i < n; i += 3) x.copyWithin(i * d, (i - 1) * d, i * d); // repeated rows → exact ties
    for (let j = 0; j < k; j += 2) p.set(x.subarray(((j * 7) % n) * d, ((j * 7) % n) * d + d), j * d); // distance 0
  }
  const tags = [opts.dup ? 'dup' : '', off ? `offset ${off}` : ''].filter(Boolean).join(', ');
  return { name: `n=${n} k=${k} d=${d}${tags ? ` (${tags})` : ''}`, n, k, d, x, p };
}

const shapeRng = mulberry32(20240601);
const randInt = (lo: number, hi: number) => lo + Math.floor(shapeRng() * (hi - lo + 1));
const CASES: Case[] = [
  makeCase(1, 1, 1, 1),
  makeCase(2, 7, 1, 1),
  makeCase(3, 7, 3, 1, { dup: true }),
  makeCase(4, 333, 17, 9, { dup: true }),
  makeCase(5, 1031, 40, 33),
  makeCase(6, 64, 64, 5, { dup: true }),
  makeCase(7, 200, 12, 48, { offset: 20 }),
  // One point (k = 1): the ONNX backend's kernel matrix feeds it in twice (onnx-backend.ts).
  makeCase(8, 500, 1, 24, { dup: true }),
  ...[0, 1, 2].map((s) => makeCase(100 + s, randInt(1, 600), randInt(1, 40), randInt(1, 70), { dup: s === 1 })),
];
const KERNELS: KernelSpec[] = [
  { kind: 'energy', a: 1 },
  { kind: 'energy', a: 0.05 },
  { kind: 'gaussian', sigma: 1.5 },
  { kind: 'gaussian', sigma: 0.3 },
];

function norms(m: Float32Array, rows: number, d: number): Float64Array {
  const out = new Float64Array(rows);
  for (let i = 0; i < rows; i++) for (let t = 0; t < d; t++) out[i] += m[i * d + t] ** 2;
  return out;
}

interface Truth {
  s: Float32Array;
  s64: Float64Array;
  tol: Float64Array;
}
const truths = new Map<Case, Truth>();

/** Distances (float64, and as the float32 the interface returns) and their tolerance, all n×k. */
function truth(c: Case): Truth {
  const memo = truths.get(c);
  if (memo) return memo;
  const s = sqDistancesSync(c.x, c.n, c.p, c.k, c.d);
  const [xx, pp] = [norms(c.x, c.n, c.d), norms(c.p, c.k, c.d)];
  const s64 = new Float64Array(c.n * c.k);
  const tol = new Float64Array(c.n * c.k);
  for (let i = 0; i < c.n; i++) {
    for (let j = 0; j < c.k; j++) {
      for (let t = 0; t < c.d; t++) s64[i * c.k + j] += (c.x[i * c.d + t] - c.p[j * c.d + t]) ** 2;
      tol[i * c.k + j] = 64 * EPS32 * (xx[i] + pp[j]) + 1e-30;
    }
  }
  truths.set(c, { s, s64, tol });
  return { s, s64, tol };
}

interface KernelTruth {
  h: Float64Array;
  hTol: Float64Array;
  stats: DataTermStats;
  hSumTol: Float64Array;
  gSumTol: Float64Array;
  gxTol: Float64Array;
}
const kernelTruths = new Map<string, KernelTruth>();

/** Reference kernel values and bounds, computed once per case and kernel for all backends. */
async function kernelTruth(c: Case, kernel: KernelSpec): Promise<KernelTruth> {
  const key = `${c.name} ${JSON.stringify(kernel)}`;
  const memo = kernelTruths.get(key);
  if (memo) return memo;
  const { n, k, d, x } = c;
  const ref = truth(c);
  const h = Float64Array.from(ref.s, (s) => kernelH(kernel, s));
  const hTol = Float64Array.from(ref.s, (s, i) => fTol(kernel, kernelH, s, ref.tol[i]));
  // Sums are bounded by REL_SUM of Σ|term| plus the summed per-term bounds; Σ_i g·x has mixed
  // signs, so both parts are taken term-wise.
  const [hSumTol, gSumTol, gxTol] = [new Float64Array(k), new Float64Array(k), new Float64Array(k * d)];
  for (let i = 0; i < n; i++) {
    for (let j = 0; j < k; j++) {
      const ij = i * k + j;
      const [gv, gt] = [kernelG(kernel, ref.s[ij]), fTol(kernel, kernelG, ref.s[ij], ref.tol[ij])];
      hSumTol[j] += REL_SUM * Math.abs(h[ij]) + hTol[ij];
      gSumTol[j] += REL_SUM * gv + gt;
      for (let t = 0; t < d; t++) gxTol[j * d + t] += (REL_SUM * gv + gt) * Math.abs(x[i * d + t]);
    }
  }
  const stats = await new ReferenceBackend().dataTerm(c.x, n, c.p, k, d, kernel);
  const out = { h, hTol, stats, hSumTol, gSumTol, gxTol: gxTol.map((v) => v + 1e-30) };
  kernelTruths.set(key, out);
  return out;
}

/** Bound on |Δf| for f ∈ {h, g} evaluated at s ± tol (both monotone in s). */
function fTol(kernel: KernelSpec, f: typeof kernelH, s: number, tol: number): number {
  const spread = Math.abs(f(kernel, s + tol) - f(kernel, Math.max(0, s - tol)));
  const scale = kernel.kind === 'energy' ? Math.sqrt(kernel.a ** 2 + s) : 1;
  // 2^-126: float32 flushes what the float64 reference keeps (e.g. exp(−s/2σ²) below 1e-38).
  return spread + 16 * EPS32 * (Math.abs(f(kernel, s)) + (f === kernelH ? scale : 0)) + 2 ** -126;
}

function expectClose(label: string, actual: ArrayLike<number>, expected: ArrayLike<number>, tol: (i: number) => number): void {
  expect(actual.length, `${label}: length`).toBe(expected.length);
  for (let i = 0; i < expected.length; i++) {
    const err = Math.abs(actual[i] - expected[i]);
    if (!(err <= tol(i))) expect.fail(`${label}[${i}]: got ${actual[i]}, expected ${expected[i]} ± ${tol(i)}`);
  }
}

const BACKENDS: Array<[string, () => Promise<ComputeBackend>]> = [
  ['reference', async () => new ReferenceBackend()],
  ['onnx (minWork 0)', () => OnnxBackend.create({ minWork: 0 })],
  // Tiny blocks: every case runs split over rows (points for nearestRows), summed in float64.
  ['onnx (minWork 0, blockElems 500)', () => OnnxBackend.create({ minWork: 0, blockElems: 500 })],
  // As a selection over rows read from a file runs it (tight memory budget).
  ['onnx (minWork 0, no memory arena)', () => OnnxBackend.create({ minWork: 0, memoryArena: false })],
];

describe('compute backend conformance', () => {
  describe.each(BACKENDS)('%s', (_name, make) => {
    let be: ComputeBackend;
    beforeAll(async () => {
      be = await make();
    });
    afterAll(async () => be.dispose());

    describe.each(CASES)('$name', (c) => {
      const { n, k, d, x, p } = c;
      const ref = truth(c);

      it('sqDistances: within the cancellation bound, never negative', async () => {
        const got = await be.sqDistances(x, n, p, k, d);
        expectClose('sqDistances', got, ref.s, (i) => ref.tol[i]);
        expect(got.every((v) => v >= 0)).toBe(true);
      });

      it.each(KERNELS)('kernelMatrix(Prepared), kernelColumnSums, kernelSums, dataTerm(Prepared): %o', async (kernel) => {
        const want = await kernelTruth(c, kernel);
        const h = await be.kernelMatrix(x, n, p, k, d, kernel);
        expect(h).toBeInstanceOf(Float64Array);
        expectClose('kernelMatrix', h, want.h, (i) => want.hTol[i]);
        expectClose('kernelMatrixPrepared', await be.kernelMatrixPrepared(prepareRows(x, n, d), n, p, k, d, kernel), want.h, (i) => want.hTol[i]);
        const sums = await be.kernelColumnSums(x, n, p, k, d, kernel);
        expectClose('kernelColumnSums', sums, want.stats.hSum, (j) => want.hSumTol[j]);
        const both = await be.kernelSums(x, n, p, k, d, kernel);
        expectClose('kernelSums.colSums', both.colSums, want.stats.hSum, (j) => want.hSumTol[j]);
        const rowWant = Array.from({ length: n }, (_, i) => want.h.slice(i * k, i * k + k).reduce((a, b) => a + b, 0));
        const rowTol = (i: number) => want.h.slice(i * k, i * k + k).reduce((a, b, j) => a + REL_SUM * Math.abs(b) + want.hTol[i * k + j], 0);
        expectClose('kernelSums.rowSums', both.rowSums, rowWant, rowTol);
        const prepared = await be.dataTermPrepared(prepareRows(x, n, d), n, p, k, d, kernel);
        expectClose('dataTermPrepared.hSum', prepared.hSum, want.stats.hSum, (j) => want.hSumTol[j]);
        expectClose('dataTermPrepared.gSum', prepared.gSum, want.stats.gSum, (j) => want.gSumTol[j]);
        expectClose('dataTermPrepared.gx', prepared.gx, want.stats.gx, (q) => want.gxTol[q]);
        const stats = await be.dataTerm(x, n, p, k, d, kernel);
        expectClose('dataTerm.hSum', stats.hSum, want.stats.hSum, (j) => want.hSumTol[j]);
        expectClose('dataTerm.gSum', stats.gSum, want.stats.gSum, (j) => want.gSumTol[j]);
        expectClose('dataTerm.gx', stats.gx, want.stats.gx, (q) => want.gxTol[q]);
      });

      it('assign: the argmin of its own sqDistances and of the reference, up to rounding ties', async () => {
        const kernel = KERNELS[(n + k) % KERNELS.length];
        const got = await be.assign(x, n, p, k, d, kernel);
        const own = await be.sqDistances(x, n, p, k, d);
        const want = await new ReferenceBackend().assign(x, n, p, k, d, kernel);
        for (let i = 0; i < n; i++) {
          const [gi, ri, row] = [got.index[i], want.index[i], i * k];
          const ownMin = Math.min(...own.subarray(row, row + k));
          // Two float32 evaluations of the same distance (one call may be split into row blocks,
          // which changes the Gemm's rounding) agree within the cancellation bound, not bitwise.
          const tol = ref.tol[row + gi];
          expect(own[row + gi] - ownMin, `row ${i}: index ${gi} is not a minimum of sqDistances`).toBeLessThanOrEqual(tol);
          expect(Math.abs(got.sqDist[i] - own[row + gi]), `row ${i}: sqDist vs sqDistances`).toBeLessThanOrEqual(tol);
          for (let j = 0; j < gi; j++) expect(ref.s64[row + j], `row ${i}: exact tie with lower point ${j}`).not.toBe(ref.s64[row + gi]);
          // Versus the reference, a different index is only acceptable when the true distances tie within rounding.
          const tie = tol + ref.tol[row + ri];
          expect(Math.abs(ref.s[row + gi] - ref.s[row + ri]), `row ${i}: ${gi} vs reference ${ri}`).toBeLessThanOrEqual(tie);
          expect(Math.abs(got.sqDist[i] - want.sqDist[i])).toBeLessThanOrEqual(tie);
        }
        expect(got.hSum).not.toBeNull();
        const kt = await kernelTruth(c, kernel);
        expectClose('assign.hSum', got.hSum!, want.hSum!, (j) => kt.hSumTol[j]);
        expect((await be.assign(x, n, p, k, d)).hSum).toBeNull();
      });

      it.each([1, Math.min(5, n), n])('nearestRows m=%i: sorted, ties by lower row, equal to reference up to ties', async (m) => {
        const got = await be.nearestRows(x, n, p, k, d, m);
        const want = await new ReferenceBackend().nearestRows(x, n, p, k, d, m);
        expect(got.index.length).toBe(k * m);
        for (let j = 0; j < k; j++) {
          const seen = new Set<number>();
          for (let r = 0; r < m; r++) {
            const q = j * m + r;
            const [gi, ri] = [got.index[q], want.index[q]];
            expect(gi >= 0 && gi < n && !seen.has(gi), `point ${j} rank ${r}: bad or repeated row ${gi}`).toBe(true);
            seen.add(gi);
            if (r > 0) {
              expect(got.sqDist[q], `point ${j} rank ${r}: ascending`).toBeGreaterThanOrEqual(got.sqDist[q - 1]);
              // Exact ties (repeated rows) in lower-row order; float32-only ties may follow float64 order.
              const prev = got.index[q - 1];
              const exactTie = got.sqDist[q] === got.sqDist[q - 1] && ref.s64[gi * k + j] === ref.s64[prev * k + j];
              if (exactTie) expect(gi, `point ${j} rank ${r}: tie order`).toBeGreaterThan(prev);
            }
            // Rows may differ from the reference only where their true distances tie within rounding.
            const tie = ref.tol[gi * k + j] + ref.tol[ri * k + j];
            expect(Math.abs(ref.s[gi * k + j] - ref.s[ri * k + j]), `point ${j} rank ${r}: row ${gi} vs ${ri}`).toBeLessThanOrEqual(tie);
            expect(Math.abs(got.sqDist[q] - ref.s[gi * k + j])).toBeLessThanOrEqual(ref.tol[gi * k + j]);
          }
        }
      });

      it('gemm: all four transposes against the reference', async () => {
        // x (n×d) · pᵀ (d×k), with each operand stored either way round.
        const xt = transpose(x, n, d);
        const pt = transpose(p, k, d);
        const want = await new ReferenceBackend().gemm(x, n, d, p, k, d, false, true);
        const rowAbs = norms(x, n, d).map(Math.sqrt);
        const colAbs = norms(p, k, d).map(Math.sqrt);
        const tol = (q: number) => 4 * d * EPS32 * rowAbs[Math.floor(q / k)] * colAbs[q % k] + 1e-30;
        expectClose('gemm nt', await be.gemm(x, n, d, p, k, d, false, true), want, tol);
        expectClose('gemm nn', await be.gemm(x, n, d, pt, d, k, false, false), want, tol);
        expectClose('gemm tn', await be.gemm(xt, d, n, pt, d, k, true, false), want, tol);
        expectClose('gemm tt', await be.gemm(xt, d, n, p, k, d, true, true), want, tol);
      });
    });

    it('gemm: a hand-checked 2×3 · 3×2 product, every transpose', async () => {
      const a = Float32Array.of(1, 2, 3, 4, 5, 6); // [[1,2,3],[4,5,6]]
      const b = Float32Array.of(7, 8, 9, 10, 11, 12); // [[7,8],[9,10],[11,12]]
      const want = [58, 64, 139, 154];
      expect(Array.from(await be.gemm(a, 2, 3, b, 3, 2, false, false))).toEqual(want);
      expect(Array.from(await be.gemm(transpose(a, 2, 3), 3, 2, b, 3, 2, true, false))).toEqual(want);
      expect(Array.from(await be.gemm(a, 2, 3, transpose(b, 3, 2), 2, 3, false, true))).toEqual(want);
      expect(Array.from(await be.gemm(transpose(a, 2, 3), 3, 2, transpose(b, 3, 2), 2, 3, true, true))).toEqual(want);
      // Aᵀ·Bᵀ = (BA)ᵀ: a 3×3 result from the same stored operands.
      expect(Array.from(await be.gemm(a, 2, 3, b, 3, 2, true, true))).toEqual([39, 49, 59, 54, 68, 82, 69, 87, 105]);
    });

    it('accepts views: offset subarrays, longer buffers, SharedArrayBuffer', async () => {
      const c = CASES[3];
      const want = await be.dataTerm(c.x, c.n, c.p, c.k, c.d, KERNELS[0]);
      const backing = new Float32Array(c.x.length + 13);
      backing.set(c.x, 5);
      const shared = new Float32Array(new SharedArrayBuffer(c.p.length * 4 + 64));
      shared.set(c.p);
      const got = await be.dataTerm(backing.subarray(5), c.n, shared, c.k, c.d, KERNELS[0]);
      expect(Array.from(got.gx)).toEqual(Array.from(want.gx));
      expect(Array.from(got.hSum)).toEqual(Array.from(want.hSum));
    });
  });

  describe('OnnxBackend specifics', () => {
    let be: OnnxBackend;
    beforeAll(async () => {
      be = await OnnxBackend.create({ minWork: 0, threads: 1 });
    });
    afterAll(async () => be.dispose());

    it('warmUp runs every graph; results are unchanged afterwards', async () => {
      const c = CASES[4];
      const before = await be.assign(c.x, c.n, c.p, c.k, c.d);
      await be.warmUp([{ n: 9, k: 3, d: 2, m: 9 }]);
      const after = await be.assign(c.x, c.n, c.p, c.k, c.d);
      expect(Array.from(after.index)).toEqual(Array.from(before.index));
    });

    it('rejects bad arguments with catalogue codes', async () => {
      const x = new Float32Array(6);
      await expect(be.sqDistances(x, 3, x, 4, 2)).rejects.toMatchObject({ code: 'DIMENSION_MISMATCH' });
      await expect(be.nearestRows(x, 3, x, 1, 2, 4)).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
      await expect(be.dataTerm(x, 3, x, 3, 2, { kind: 'gaussian', sigma: 0 })).rejects.toBeInstanceOf(CairnError);
      await expect(be.gemm(x, 2, 3, x, 2, 3, false, false)).rejects.toMatchObject({ code: 'DIMENSION_MISMATCH' });
      await expect(OnnxBackend.create({ threads: 0 })).rejects.toMatchObject({ code: 'INVALID_ARGUMENT' });
    });

    it('empty shapes and the tiny-call route give the reference results', async () => {
      const empty = await be.assign(new Float32Array(0), 0, new Float32Array(4), 2, 2);
      expect(empty.index.length).toBe(0);
      const sums = await be.kernelColumnSums(new Float32Array(0), 0, new Float32Array(4), 2, 2, KERNELS[0]);
      expect(Array.from(sums)).toEqual([0, 0]);
      const routed = await createBackend('onnx', { minWork: 1e9 });
      const c = CASES[2];
      expect(await routed.sqDistances(c.x, c.n, c.p, c.k, c.d)).toEqual(sqDistancesSync(c.x, c.n, c.p, c.k, c.d));
      await routed.dispose();
    });

    it('is unusable after dispose', async () => {
      const other = await OnnxBackend.create({ minWork: 0 });
      await other.dispose();
      await expect(other.sqDistances(new Float32Array(2), 1, new Float32Array(2), 1, 2)).rejects.toMatchObject({ code: 'COMPUTE_BACKEND_FAILED' });
    });
  });
});

function transpose(m: Float32Array, rows: number, cols: number): Float32Array {
  const out = new Float32Array(rows * cols);
  for (let i = 0; i < rows; i++) for (let j = 0; j < cols; j++) out[j * rows + i] = m[i * cols + j];
  return out;
}

import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { ComputeBackend } from '../../src/compute/backend.js';
import { initialDescentState, runDescent, type DescentOptions, type DescentState } from '../../src/core/descent.js';
import { decodeCheckpoint, encodeCheckpoint } from '../../src/core/checkpoint.js';
import { Rng } from '../../src/core/random.js';
import { select } from '../../src/core/select.js';
import { DenseRows } from '../../src/core/rows.js';
import { defaultBackend } from '../helpers/backends.js';

let backend: ComputeBackend;
beforeAll(async () => {
  backend = await defaultBackend();
});
afterAll(async () => backend.dispose());

/** A deep copy, as a checkpoint written to disk and read back would be. */
function checkpoint(state: DescentState): DescentState {
  return {
    ...state,
    points: Float32Array.from(state.points),
    weights: Float64Array.from(state.weights),
    optimizer: { ...state.optimizer, m: Float64Array.from(state.optimizer.m), v: Float64Array.from(state.optimizer.v) },
    cEma: state.cEma ? Float64Array.from(state.cEma) : null,
    shuffleState: [...state.shuffleState],
  };
}

describe('descent checkpoints', () => {
  const rng = new Rng(3);
  const n = 5000;
  const d = 5;
  const rows = new DenseRows(Float32Array.from({ length: n * d }, () => rng.normal()), n, d);
  const options = (maxIterations: number): DescentOptions => ({
    optimizer: 'adam',
    batchSize: 512,
    maxIterations,
    timeBudgetMs: null,
    learningRate: 0.05,
    finalLearningRateFraction: 0.01,
    plateauTolerance: 0,
    plateauWindow: 100,
    weightEvery: 25,
    optimizeWeights: true,
    weightsFrom: 0.7,
  });
  const context = (r: Rng) => ({ rows, backend, kernel: { kind: 'energy' as const, a: 0.03 }, rng: r, scale: 3, constant: 0, now: () => 0 });

  it('a descent stopped and resumed from a saved state and generator ends where an uninterrupted one does', async () => {
    const seedPoints = rows.gather([1, 2, 3, 4, 5, 6]);
    const straightRng = new Rng(9);
    const straight = await runDescent(context(straightRng), initialDescentState(Float32Array.from(seedPoints), 6, 'adam', straightRng), options(120));

    const firstRng = new Rng(9);
    const first = initialDescentState(Float32Array.from(seedPoints), 6, 'adam', firstRng);
    // Stop after 50 iterations, as a cancelled or killed worker would have checkpointed.
    let calls = 0;
    await runDescent({ ...context(firstRng), shouldStop: () => ++calls >= 50 }, first, options(120));
    expect(first.iteration).toBe(50);
    const saved = checkpoint(first);
    const savedRng = firstRng.state();

    const resumedRng = Rng.fromState(savedRng);
    const resumed = await runDescent(context(resumedRng), saved, options(120));
    expect(resumed.state.iteration).toBe(120);
    expect(Array.from(resumed.state.points)).toEqual(Array.from(straight.state.points));
    expect(Array.from(resumed.state.weights)).toEqual(Array.from(straight.state.weights));
  });
});

describe('selection checkpoints', () => {
  const rng = new Rng(21);
  const n = 3000;
  const d = 4;
  const data = Float32Array.from({ length: n * d }, () => rng.normal());
  const options = { k: 7, seed: 5, maxIterations: 160, weights: 'optimized' as const };

  it('a selection resumed from a checkpoint read back from its JSON text returns the uninterrupted result', async () => {
    const straight = await select(new DenseRows(Float32Array.from(data), n, d), options, { backend });

    const saved: string[] = [];
    let calls = 0;
    await select(new DenseRows(Float32Array.from(data), n, d), options, {
      backend,
      now: () => calls++,
      // One checkpoint per iteration (each `now()` call advances the clock by at least 1 ms).
      checkpoint: { everyMs: 1, save: (cp) => void saved.push(encodeCheckpoint(cp)) },
    });
    expect(saved.length).toBeGreaterThan(50);
    const middle = decodeCheckpoint(saved[Math.floor(saved.length / 2)], options.k, d);
    expect(middle).not.toBeNull();
    expect(middle!.state.iteration).toBeGreaterThan(10);
    expect(middle!.state.iteration).toBeLessThan(150);

    const resumed = await select(new DenseRows(Float32Array.from(data), n, d), options, { backend, checkpoint: { save: () => undefined, resume: middle } });
    expect(resumed.representatives.map((r) => r.index)).toEqual(straight.representatives.map((r) => r.index));
    expect(resumed.discrepancy.value).toBe(straight.discrepancy.value);
    expect(resumed.trace.iterations).toBe(straight.trace.iterations);
    expect(resumed.trace.loss).toEqual(straight.trace.loss);
  });

  it('with fixed items and a previous selection, a resumed selection (k + f points in the checkpoint) returns the uninterrupted result', async () => {
    const rows = () => new DenseRows(Float32Array.from(data), n, d);
    const fixedRows = Int32Array.of(10, 20, -1);
    const fixedVectors = new Float32Array(3 * d);
    fixedVectors.set(rows().gather([10, 20]));
    fixedVectors.set([3, 3, 3, 3], 2 * d);
    // Earlier representatives: 5 of k = 7 (k-means++ completes them), one of them deleted since.
    const prevRows = Int32Array.of(100, 200, 300, -1, 500);
    const given = () => ({
      fixed: { vectors: fixedVectors, rows: fixedRows },
      previous: { vectors: rows().gather([100, 200, 300, 400, 500]), rows: prevRows, strength: 0.5 },
    });
    const straight = await select(rows(), options, { backend, ...given() });

    const saved: string[] = [];
    let calls = 0;
    await select(rows(), options, {
      backend,
      ...given(),
      now: () => calls++,
      checkpoint: { everyMs: 1, save: (cp) => void saved.push(encodeCheckpoint(cp)) },
    });
    expect(saved.length).toBeGreaterThan(50);
    const middle = decodeCheckpoint(saved[Math.floor(saved.length / 2)], options.k + 3, d);
    expect(middle).not.toBeNull();
    expect(middle!.state.iteration).toBeGreaterThan(10);
    // The fixed points are in the checkpoint, unmoved since the first one.
    const first = decodeCheckpoint(saved[0], options.k + 3, d)!;
    expect(Array.from(middle!.state.points.subarray(options.k * d))).toEqual(Array.from(first.state.points.subarray(options.k * d)));

    // A fresh start would give the same result too: the first iteration reported shows it resumed.
    const firstIteration = (seen: number[]) => (p: { phase: string; iteration?: number }) => void (p.phase === 'descent' && p.iteration !== undefined && seen.push(p.iteration));
    const seen: number[] = [];
    const resumedFrom = middle!.state.iteration; // the resumed descent continues in this very state
    const resumed = await select(rows(), options, { backend, ...given(), onProgress: firstIteration(seen), checkpoint: { save: () => undefined, resume: middle } });
    expect(seen[0]).toBe(resumedFrom + 1);
    expect(resumed.representatives).toEqual(straight.representatives);
    expect(resumed.fixed).toEqual(straight.fixed);
    expect(resumed.stability).toEqual(straight.stability);
    expect(resumed.coverageGain).toEqual(straight.coverageGain);
    expect(resumed.discrepancy.value).toBe(straight.discrepancy.value);
    expect(resumed.trace.iterations).toBe(straight.trace.iterations);
    expect(resumed.trace.loss).toEqual(straight.trace.loss);
    // A checkpoint of the plain selection (k points) does not fit this one: it starts afresh, correctly.
    const plainSaved: string[] = [];
    let plainCalls = 0;
    await select(rows(), options, { backend, now: () => plainCalls++, checkpoint: { everyMs: 1, save: (cp) => void plainSaved.push(encodeCheckpoint(cp)) } });
    const plainMiddle = decodeCheckpoint(plainSaved[Math.floor(plainSaved.length / 2)], options.k, d);
    const seenAfresh: number[] = [];
    const mismatched = await select(rows(), options, { backend, ...given(), onProgress: firstIteration(seenAfresh), checkpoint: { save: () => undefined, resume: plainMiddle } });
    expect(seenAfresh[0]).toBe(1);
    expect(mismatched.representatives).toEqual(straight.representatives);
  });

  it('a damaged or mismatched checkpoint text decodes to null, so the descent starts afresh', () => {
    expect(decodeCheckpoint('{"version":1,"state":', 7, d)).toBeNull();
    expect(decodeCheckpoint(JSON.stringify({ version: 2 }), 7, d)).toBeNull();
    const state = initialDescentState(new Float32Array(7 * d), 7, 'adam', new Rng(1));
    const text = encodeCheckpoint({ version: 1, state, rng: [1, 2, 3, 4], trace: [] });
    expect(decodeCheckpoint(text, 7, d)).not.toBeNull();
    expect(decodeCheckpoint(text, 8, d)).toBeNull();
  });
});

import type { DescentState } from './descent.js';

/**
 * A saved descent: everything a later attempt of the same job needs to continue exactly where this
 * one stopped (the descent state, the generator state at that iteration, and the loss trace so far).
 * Encoded as plain JSON: JavaScript prints every float64 (and so every float32) so that it parses
 * back to the same value, so a checkpoint read back resumes bit for bit.
 */
export interface DescentCheckpoint {
  version: 1;
  state: DescentState;
  rng: number[];
  trace: Array<[number, number]>;
}

interface EncodedState extends Omit<DescentState, 'points' | 'weights' | 'optimizer' | 'cEma'> {
  points: number[];
  weights: number[];
  optimizer: { kind: DescentState['optimizer']['kind']; step: number; m: number[]; v: number[] };
  cEma: number[] | null;
}

/** A JSON text of the checkpoint; it copies everything, so the live state may change afterwards. */
export function encodeCheckpoint(cp: DescentCheckpoint): string {
  const s = cp.state;
  const state: EncodedState = {
    ...s,
    points: Array.from(s.points),
    weights: Array.from(s.weights),
    optimizer: { kind: s.optimizer.kind, step: s.optimizer.step, m: Array.from(s.optimizer.m), v: Array.from(s.optimizer.v) },
    cEma: s.cEma ? Array.from(s.cEma) : null,
    shuffleState: [...s.shuffleState],
  };
  return JSON.stringify({ version: 1, state, rng: cp.rng, trace: cp.trace });
}

/**
 * Parses a checkpoint written by encodeCheckpoint (for k points of d dimensions; any d when
 * omitted: select() checks the width against its space). Returns null for anything else (an older
 * version, a truncated file): the job then starts its descent afresh, which is always correct.
 */
export function decodeCheckpoint(text: string, k: number, d?: number): DescentCheckpoint | null {
  let raw: { version?: unknown; state?: EncodedState; rng?: unknown; trace?: unknown };
  try {
    raw = JSON.parse(text) as typeof raw;
  } catch {
    return null;
  }
  const s = raw.state;
  if (raw.version !== 1 || !s || !Array.isArray(raw.rng) || raw.rng.length !== 4 || !Array.isArray(raw.trace)) return null;
  if (!Array.isArray(s.points) || s.points.length === 0 || s.points.length % k !== 0 || (d !== undefined && s.points.length !== k * d) || !Array.isArray(s.weights) || s.weights.length !== k) return null;
  if (!s.optimizer || !Array.isArray(s.optimizer.m) || !Array.isArray(s.optimizer.v) || !Array.isArray(s.shuffleState)) return null;
  return {
    version: 1,
    rng: raw.rng as number[],
    trace: raw.trace as Array<[number, number]>,
    state: {
      ...s,
      points: Float32Array.from(s.points),
      weights: Float64Array.from(s.weights),
      optimizer: { kind: s.optimizer.kind, step: s.optimizer.step, m: Float64Array.from(s.optimizer.m), v: Float64Array.from(s.optimizer.v) },
      cEma: s.cEma ? Float64Array.from(s.cEma) : null,
    },
  };
}

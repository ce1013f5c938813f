/**
 * First-order steps on a flat parameter array. Adam (Kingma & Ba, ICLR 2015) is the default:
 * its per-coordinate scaling makes one step size work across datasets of different scales.
 * The state is plain arrays so a checkpoint can store it and a resumed job continue exactly.
 */
export type OptimizerKind = 'adam' | 'sgd';

export interface OptimizerState {
  kind: OptimizerKind;
  step: number;
  /** Adam: first moment; SGD: velocity. */
  m: Float64Array;
  /** Adam: second moment; unused by SGD. */
  v: Float64Array;
}

export function createOptimizerState(kind: OptimizerKind, size: number): OptimizerState {
  return { kind, step: 0, m: new Float64Array(size), v: new Float64Array(kind === 'adam' ? size : 0) };
}

export interface StepOptions {
  lr: number;
  /** Adam β1 (default 0.9) or SGD momentum (default 0.9). */
  beta1?: number;
  /** Adam β2. Default 0.999. */
  beta2?: number;
  /** Adam ε, in units of the gradient. Default 1e-12 relative to nothing: tiny, only avoids 0/0. */
  eps?: number;
  /** Coordinates that must not move (fixed points); 1 = frozen. */
  frozen?: Uint8Array;
  /** Number of coordinates per frozen entry (d when `frozen` is per point). Default 1. */
  frozenStride?: number;
}

/** Moves params against grad in place. */
export function optimizerStep(state: OptimizerState, params: Float32Array, grad: Float64Array, o: StepOptions): void {
  const b1 = o.beta1 ?? 0.9;
  const stride = o.frozenStride ?? 1;
  state.step++;
  if (state.kind === 'sgd') {
    for (let i = 0; i < params.length; i++) {
      if (o.frozen && o.frozen[Math.floor(i / stride)]) continue;
      state.m[i] = b1 * state.m[i] + grad[i];
      params[i] -= o.lr * state.m[i];
    }
    return;
  }
  const b2 = o.beta2 ?? 0.999;
  const eps = o.eps ?? 1e-12;
  const c1 = 1 - Math.pow(b1, state.step);
  const c2 = 1 - Math.pow(b2, state.step);
  for (let i = 0; i < params.length; i++) {
    if (o.frozen && o.frozen[Math.floor(i / stride)]) continue;
    const g = grad[i];
    state.m[i] = b1 * state.m[i] + (1 - b1) * g;
    state.v[i] = b2 * state.v[i] + (1 - b2) * g * g;
    params[i] -= (o.lr * (state.m[i] / c1)) / (Math.sqrt(state.v[i] / c2) + eps);
  }
}

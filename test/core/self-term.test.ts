import { describe, expect, it } from 'vitest';
import { ReferenceBackend } from '../../src/compute/reference-backend.js';
import type { KernelSpec } from '../../src/compute/kernel-spec.js';
import { selfTermDirect, selfTermOnBackend } from '../../src/core/descent.js';
import { Rng } from '../../src/core/random.js';

const kernels: KernelSpec[] = [
  { kind: 'energy', a: 0.05 },
  { kind: 'gaussian', sigma: 1.5 },
];

describe('self term Σᵢⱼ wᵢwⱼ h(|pᵢ − pⱼ|)', () => {
  const rng = new Rng(12);
  const k = 7;
  const d = 5;
  const points = Float32Array.from({ length: k * d }, () => rng.normal());
  const raw = Float64Array.from({ length: k }, () => rng.next() + 0.1);
  const weights = raw.map((w) => w / raw.reduce((a, b) => a + b, 0));

  it.each(kernels)('direct and backend paths agree (%o)', async (kernel) => {
    const direct = selfTermDirect(kernel, points, weights, k, d);
    const viaBackend = await selfTermOnBackend(new ReferenceBackend(), kernel, points, weights, k, d);
    // The backend path's distances and k×k×d product come back in float32 (relative error ~6e-8).
    expect(direct.quadratic).toBeCloseTo(viaBackend.quadratic, 6);
    direct.K.forEach((v, i) => expect(v).toBeCloseTo(viaBackend.K[i], 6));
    direct.grad.forEach((v, i) => expect(v).toBeCloseTo(viaBackend.grad[i], 5));
  });

  it.each(kernels)('its gradient is the derivative of the quadratic: ∂/∂pⱼ = 2wⱼ·grad[j] (central differences, %o)', (kernel) => {
    const base = selfTermDirect(kernel, points, weights, k, d);
    const eps = 1e-3;
    for (const [j, t] of [[0, 0], [3, 2], [6, 4]]) {
      const shifted = (delta: number) => {
        const p = Float32Array.from(points);
        p[j * d + t] += delta;
        return selfTermDirect(kernel, p, weights, k, d).quadratic;
      };
      // float32 points: the step is represented exactly to ~1e-7, so 1e-3 steps give ~1e-5 accuracy.
      const numeric = (shifted(eps) - shifted(-eps)) / (2 * eps);
      expect(numeric).toBeCloseTo(2 * weights[j] * base.grad[j * d + t], 4);
    }
  });
});

